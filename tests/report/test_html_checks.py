"""report.html refuses listed figures it has no image for, and shows warnings and ties."""

from __future__ import annotations

import json

import pytest

from explain.errors import InputError
from explain.report.html import report_html


def _report(written_report):
    out, _ = written_report
    return out, json.loads((out / "report.json").read_text())


def test_a_listed_figure_without_bytes_is_an_error_naming_it(written_report):
    out, report = _report(written_report)
    images = {name: (out / name).read_bytes() for name in report["files"]["figures"]}
    missing = report["files"]["figures"][0]
    del images[missing]
    with pytest.raises(InputError, match=missing.replace(".", r"\.")):
        report_html(report, images)
    images[missing] = b""
    with pytest.raises(InputError, match="empty PNG bytes"):
        report_html(report, images)


def test_warnings_and_a_tie_are_said_on_the_page(written_report):
    out, report = _report(written_report)
    images = {name: (out / name).read_bytes() for name in report["files"]["figures"]}
    assert report["warnings"] == [] and report["culprit"]["tied_with"] == []
    report["warnings"] = ["integrated_gradients: completeness gap 40 % of |F(x) - F(baseline)|"]
    report["culprit"]["tied_with"] = [6]
    page = report_html(report, images)
    assert "<b>Warnings.</b>" in page and "completeness gap 40 %" in page
    assert "level with segment(s) 6" in page


def test_the_contribution_caption_says_exact_only_when_exact(written_report):
    out, report = _report(written_report)
    images = {name: (out / name).read_bytes() for name in report["files"]["figures"]}
    report["settings"]["shapley"] = "exact over all coalitions of segments"
    assert "(exact over all coalitions of segments)" in report_html(report, images)
    report["settings"]["shapley"] = "sampled: 256 permutations (seed 0)"
    for s in report["segments"]:
        s["shapley_stderr"] = 0.01
    page = report_html(report, images)
    assert "exact" not in page.split("<h2>Figures</h2>")[1].split("<h2>Settings</h2>")[0]
    assert "sampled: 256 permutations" in page and "&plusmn; 0.010" in page
