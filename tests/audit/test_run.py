"""Whole audits: what they write, resuming, being killed, and running on a Dask cluster.

Every comparison is against one uninterrupted run (``reference_run``), ``seconds`` aside: a run
that resumes, loses a worker, is killed, or runs on two Dask workers must write the same
cases.csv and summary.json.
"""

import json
import os
import re
import shutil
import signal
import subprocess
import sys
import time
from pathlib import Path

import psutil
import pytest

from explain.audit import run_audit
from explain.cli import main
from explain.errors import InputError

@pytest.fixture(autouse=True)
def _kit(audit_kit):
    global METHODS, OPTIONS, without_seconds
    METHODS, OPTIONS, without_seconds = (audit_kit.METHODS, audit_kit.OPTIONS,
                                         audit_kit.without_seconds)


FIRST = ["case_id", "case", "status", "error", "seconds", "reference_grade", "predicted_grade",
         "grade_error", "culprit", "reference_culprit", "culprit_hit", "margin"]


def test_what_an_audit_writes(cohort, reference_run):
    out, result = reference_run
    assert result.exit_status == 1  # two cases of six cannot be explained
    header = (out / "cases.csv").read_text().splitlines()[0].split(",")
    per_method = [f"{METHODS}_pointing_hit", f"{METHODS}_peak_error_mm",
                  f"{METHODS}_relevance_mass"]
    assert header[:len(FIRST)] == FIRST
    assert header[len(FIRST):len(FIRST) + 4] == per_method + ["flags"]
    assert "cohort_case_id" in header and "pattern" in header  # metadata follows, kept
    rows = without_seconds(out / "cases.csv")
    assert [r["case_id"] for r in rows] == ["case-0000", "case-0001", "ghost", "case-0002",
                                            "case-0003", "broken-centerline"]
    status = {r["case_id"]: r for r in rows}
    assert status["ghost"]["status"] == "failed" and "case.json" in status["ghost"]["error"]
    assert "not-a-number" in status["broken-centerline"]["error"] or \
        "line 2" in status["broken-centerline"]["error"]
    for r in rows:
        assert "\n" not in r["error"]
        if r["status"] == "ok":
            assert (out / "cases" / r["case_id"] / "report.html").is_file()
            assert r["predicted_grade"] and r["culprit"]
    summary = json.loads((out / "summary.json").read_text())
    assert summary["counts"]["ok"] == 4 and summary["counts"]["failed"] == 2
    assert summary["confusion"]["labels"] == ["0", "1", "2", "3", "4A", "4B", "5"]
    assert summary["weights_hash"] and summary["library_version"]
    assert summary["settings"]["methods"] == [METHODS]


def test_every_link_of_the_page_resolves(reference_run):
    out, _ = reference_run
    page = (out / "index.html").read_text()
    assert "not a medical device" in page
    links = re.findall(r'href="([^"]+)"', page)
    for link in links:
        assert (out / link).is_file(), link


def test_page_in_headless_chromium(reference_run, tmp_path, chromium):
    out, _ = reference_run
    dom, console = chromium.run(out / "index.html", tmp_path, "--dump-dom")
    assert console == []
    assert "Cohort audit" in dom and "Cases that could not be explained" in dom
    chromium.artifacts.mkdir(exist_ok=True)
    shot = chromium.artifacts / "audit-index.png"
    chromium.run(out / "index.html", tmp_path, f"--screenshot={shot}", "--window-size=1200,2400")
    assert shot.stat().st_size > 10_000


def test_rerun_skips_finished_cases_and_refuses_other_settings(cohort, reference_run, tmp_path,
                                                               capsys):
    out, _ = reference_run
    copy = tmp_path / "again"
    shutil.copytree(out, copy)
    before = {p.name: p.read_text() for p in (copy / "rows").iterdir()}
    status = main(["audit", "--cohort", str(cohort), "--model", "builtin:reference", "--out",
                   str(copy), "--methods", METHODS, "--quiet", "--workers", "0"])
    assert status == 1
    after = {p.name: p.read_text() for p in (copy / "rows").iterdir()}
    for name, text in before.items():
        if json.loads(text)["status"] == "ok":
            assert after[name] == text  # skipped: not even its seconds changed
    assert without_seconds(copy / "cases.csv") == without_seconds(out / "cases.csv")
    with pytest.raises(InputError, match="other settings"):
        run_audit(cohort, "builtin:reference", copy, workers=0, methods=METHODS, seed=1)
    capsys.readouterr()
    status = main(["audit", "--cohort", str(cohort), "--model", "builtin:reference", "--out",
                   str(copy), "--methods", METHODS, "--seed", "1", "--quiet"])
    assert status == 2 and "--force" in capsys.readouterr().err


def test_two_local_workers_equal_one(cohort, reference_run, tmp_path):
    out, _ = reference_run
    result = run_audit(cohort, "builtin:reference", tmp_path / "two", workers=2, **OPTIONS)
    assert without_seconds(tmp_path / "two" / "cases.csv") == without_seconds(out / "cases.csv")
    assert result.summary["counts"] == json.loads((out / "summary.json").read_text())["counts"]


def test_dask_local_cluster_equals_local_run(cohort, reference_run, tmp_path):
    distributed = pytest.importorskip("distributed")
    out, _ = reference_run
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                  dashboard_address=None, host="127.0.0.1") as cluster, \
            distributed.Client(cluster) as client:
        run_audit(cohort, "builtin:reference", tmp_path / "dask", scheduler=client, **OPTIONS)
    assert without_seconds(tmp_path / "dask" / "cases.csv") == without_seconds(out / "cases.csv")
    ours = json.loads((tmp_path / "dask" / "summary.json").read_text())
    theirs = json.loads((out / "summary.json").read_text())
    # Counts, confusion and rates are exact. The metric means are sums of full-precision floats
    # computed by torch in another kind of process: they may differ in the last bit.
    assert {k: v for k, v in ours.items() if k != "metrics"} == \
        {k: v for k, v in theirs.items() if k != "metrics"}
    assert ours["metrics"].keys() == theirs["metrics"].keys()
    for name, stats in ours["metrics"].items():
        for key, value in stats.items():
            other = theirs["metrics"][name][key]
            assert value == other or value == pytest.approx(other, rel=1e-12), (name, key)


def _start(cohort, out, workers):
    cmd = [sys.executable, "-m", "explain.cli", "audit", "--cohort", str(cohort), "--model",
           "builtin:reference", "--out", str(out), "--methods", METHODS, "--workers",
           str(workers), "--quiet"]
    return subprocess.Popen(cmd, start_new_session=True, stdout=subprocess.DEVNULL,
                            stderr=subprocess.PIPE, cwd=Path(__file__).resolve().parents[2],
                            env={**os.environ, "PYTHONPATH": str(Path(__file__).resolve().parents[2])})


def _wait_for_rows(out, proc, count, timeout=240):
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        rows = list((out / "rows").glob("*.json")) if (out / "rows").is_dir() else []
        if len(rows) >= count:
            return len(rows)
        if proc.poll() is not None:
            pytest.fail(f"the audit ended before it could be killed: {proc.stderr.read()}")
        time.sleep(0.02)
    pytest.fail("no result rows appeared")


def test_killed_run_resumes_to_the_same_result(cohort, reference_run, tmp_path):
    out, _ = reference_run
    target = tmp_path / "killed"
    proc = _start(cohort, target, workers=1)
    seen = _wait_for_rows(target, proc, 1)
    os.killpg(proc.pid, signal.SIGKILL)  # the run and its worker, at once
    proc.communicate(timeout=30)
    assert seen < 6 and not (target / "cases.csv").exists()
    result = run_audit(cohort, "builtin:reference", target, workers=1, **OPTIONS)
    assert without_seconds(target / "cases.csv") == without_seconds(out / "cases.csv")
    assert len(result.rows) == 6
    assert not [p for p in (target / "cases").iterdir() if p.name.startswith(".")]


def _pool_workers(proc):
    parent = psutil.Process(proc.pid)
    return [c for c in parent.children(recursive=True)
            if "spawn_main" in " ".join(c.cmdline()) and "resource_tracker" not in
            " ".join(c.cmdline())]


def test_one_killed_worker_is_replaced(cohort, reference_run, tmp_path):
    out, _ = reference_run
    target = tmp_path / "one-worker-killed"
    proc = _start(cohort, target, workers=2)
    _wait_for_rows(target, proc, 1)
    workers = _pool_workers(proc)
    assert workers, "no worker process found"
    workers[0].kill()
    _, err = proc.communicate(timeout=300)
    assert proc.returncode == 1, err  # the cohort's two bad cases, nothing more
    assert without_seconds(target / "cases.csv") == without_seconds(out / "cases.csv")
