"""A small phantom cohort for the audit tests: four good cases, one missing, one broken.

The cases are our own synthetic phantoms; they feed the tests, they are not the reference
anything is checked against. ``gradient`` alone keeps each case to about a second.
"""

import csv
import json
import shutil
from types import SimpleNamespace

import pytest

from explain.phantom import write_cohort

METHODS = "gradient"
OPTIONS = {"methods": METHODS, "seed": 0}


def _read(path):
    with open(path, newline="", encoding="utf-8") as handle:
        return list(csv.DictReader(handle))


def without_seconds(path):
    """cases.csv rows with the ``seconds`` column removed (the only field that may differ)."""
    rows = _read(path)
    for row in rows:
        row.pop("seconds")
    return rows


@pytest.fixture(scope="session")
def cohort(tmp_path_factory):
    """cohort.csv: 4 phantom cases, a row whose manifest is missing, a case with a bad centerline."""
    root = tmp_path_factory.mktemp("cohort")
    table = write_cohort(root / "phantoms", count=4, seed=5)
    broken = root / "phantoms" / "broken"
    shutil.copytree(root / "phantoms" / "case-0001", broken)
    manifest = json.loads((broken / "case.json").read_text())
    manifest["case_id"] = "broken-centerline"
    (broken / "case.json").write_text(json.dumps(manifest))
    first = manifest["segments"][0]["centerline"]
    (broken / first).write_text("x,y,z\n1,2,not-a-number\n")
    rows = _read(table)
    fields = list(rows[0])
    rows.insert(2, {**{k: "" for k in fields}, "case": "missing/case.json", "case_id": "ghost"})
    rows.append({**{k: "" for k in fields}, "case": "broken/case.json",
                 "case_id": "broken-centerline"})
    out = root / "phantoms" / "audit-cohort.csv"
    with open(out, "w", newline="", encoding="utf-8") as handle:
        writer = csv.DictWriter(handle, fieldnames=fields, lineterminator="\n")
        writer.writeheader()
        writer.writerows(rows)
    return out


@pytest.fixture(scope="session")
def reference_run(cohort, tmp_path_factory):
    """One uninterrupted audit on one worker process: the run the others are compared with."""
    from explain.audit import run_audit

    out = tmp_path_factory.mktemp("audit") / "reference"
    result = run_audit(cohort, "builtin:reference", out, workers=1, **OPTIONS)
    return out, result


@pytest.fixture(scope="session")
def audit_kit():
    """The settings every audit test runs with, and the row comparison."""
    return SimpleNamespace(METHODS=METHODS, OPTIONS=OPTIONS, without_seconds=without_seconds)
