"""Quality in every report: explain_case(quality=True) with a hand-built linear model whose
faithfulness curves follow by hand, the report.json fields the cohort audit reads, segments.csv,
report.html's section, inconclusive wording, and the command line's quality options.

The model: one feature per segment, its mean HU / 100, max over segments, identity head. So
v(T) = max over T and the baseline segment of the means / 100, and deleting pixels of the
culprit lowers its mean by their sum / (100 n): the curves of Petsiuk, Das, Saenko 2018
(deletion and insertion) are cumulative sums, computed below with numpy.
"""

import json

import numpy as np
import pytest
import torch

from explain.audit.rows import report_row
from explain.cli import main
from explain.model import wrap_model
from explain.report import explain_case

BASELINE_HU = -1000.0


class MeanHU(torch.nn.Module):
    """Linear head on one feature: the segment's mean HU / 100."""

    def encode_segments(self, x):
        return x.mean(dim=(2, 3, 4))[..., None] / 100.0

    def head(self, pooled):
        return pooled

    def forward(self, x):
        return self.head(self.encode_segments(x).amax(dim=1))


@pytest.fixture(scope="module")
def linear(synth):
    case = synth.make_case(lesion_hu=900.0)      # segment 7 brightest: the culprit
    model = wrap_model(MeanHU(), name="mean-hu")
    e = explain_case(model, case, methods=["gradient_x_input"], target=0, points=20, size=11,
                     pixel_mm=0.5, baseline_hu=BASELINE_HU, seed=0)
    return case, e


def test_segment_curves_follow_the_max_of_means(linear):
    _, e = linear
    means = e.sections.values.reshape(len(e.segments), -1).astype(np.float64).mean(axis=1) / 100
    base = BASELINE_HU / 100
    order = np.argsort(-np.array([s.shapley for s in e.segments]), kind="stable")
    deletion = [max([base] + list(means[order[k:]])) for k in range(len(order) + 1)]
    insertion = [max([base] + list(means[order[:k]])) for k in range(len(order) + 1)]
    seg = e.quality.faithfulness["segments"]
    assert seg["deletion"] == pytest.approx(deletion)
    assert seg["insertion"] == pytest.approx(insertion)
    assert seg["order"][0] == 7


def test_culprit_pixel_deletion_follows_the_cumulative_sum(linear):
    _, e = linear
    c = e.culprit_index
    values = e.sections.values[c].astype(np.float64).ravel()
    n = values.size
    score = np.maximum(e.maps["gradient_x_input"][c].astype(np.float64).ravel(), 0)
    order = np.argsort(-score, kind="stable")
    others = max([BASELINE_HU / 100] + [values_.mean() / 100 for s, values_ in
                 enumerate(e.sections.values.reshape(len(e.segments), -1)) if s != c])
    expected = []
    for k in range(21):
        count = int(round(k / 20 * 0.2 * n))
        deleted = values.copy()
        deleted[order[:count]] = BASELINE_HU
        expected.append(max(deleted.mean() / 100, others))
    got = e.quality.faithfulness["culprit_cross_sections"]["methods"]["gradient_x_input"]
    assert got["deletion"] == pytest.approx(expected, rel=1e-5)
    assert got["deletion_auc"] < got["random_deletion_auc"]   # brightest first drops fastest


def test_report_json_carries_what_the_audit_reads(linear, tmp_path):
    _, e = linear
    e.write(tmp_path / "out")
    report = json.loads((tmp_path / "out" / "report.json").read_text())
    q = report["quality"]
    for key in ("culprit_hit", "pointing_hit", "peak_error_mm", "relevance_mass"):
        assert key in q["localisation"]
    assert isinstance(q["flags"], list)
    row = report_row(report, case_id="c", case="c.json", seconds=0.0,
                     methods=["gradient_x_input"])
    assert row["culprit_hit"] is True
    assert row["gradient_x_input_relevance_mass"] == q["localisation"]["relevance_mass"][
        "gradient_x_input"]
    header = (tmp_path / "out" / "segments.csv").read_text().splitlines()[0].split(",")
    assert "gradient_x_input_inside_vessel_share" in header
    html = (tmp_path / "out" / "report.html").read_text()
    assert "How far to trust this" in html and "figures/faithfulness.png" in html


def test_quality_false_leaves_no_quality_object(synth):
    case = synth.make_case(lesion_hu=900.0)
    e = explain_case(wrap_model(MeanHU()), case, methods=["gradient"], target=0, points=20,
                     size=11, pixel_mm=0.5, baseline_hu=BASELINE_HU, quality=False)
    assert e.quality is None and "quality" not in e.to_dict()


def test_no_positive_segment_is_said_in_plain_words(synth, tmp_path):
    # baseline brighter than every segment: every Shapley value is <= 0
    case = synth.make_case()
    e = explain_case(wrap_model(MeanHU()), case, methods=["gradient"], target=0, points=20,
                     size=11, pixel_mm=0.5, baseline_hu=2000.0)
    report = e.to_dict()
    assert report["culprit"]["doubts"][0] == "no_positive_segment"
    assert report["culprit"]["statement"].startswith("Inconclusive: no segment raised")
    assert "no_positive_segment" in report["quality"]["flags"]
    e.write(tmp_path / "out")
    html = (tmp_path / "out" / "report.html").read_text()
    assert "Inconclusive: no segment raised the target" in html
    assert "The segment that drove the target" not in html


@pytest.mark.parametrize("option, words", [
    (["--tolerance-mm", "-1"], "tolerance_mm"),
    (["--flag-threshold", "on_bone=0.2"], "on_bone"),
    (["--wall-margin-mm", "-2"], "wall_margin_mm"),
    (["--flag-threshold", "on_border"], "NAME=VALUE"),
])
def test_bad_quality_options_are_one_line_exit_2(tmp_path, capsys, option, words):
    out = tmp_path / "out"
    code = main(["explain", "--case", str(tmp_path / "nope.json"), "--model",
                 "builtin:reference", "--out", str(out), *option])
    err = capsys.readouterr().err
    assert code == 2 and err.count("\n") == 1 and words in err and "Traceback" not in err
    assert not out.exists()
