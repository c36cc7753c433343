"""``run_audit``: explain every case of a cohort, rank the failures, resume where a run stopped.

The output folder ``DIR``:

- ``audit.json``: what the run was asked (cohort, model, weights hash, settings); a rerun with
  other settings or weights is refused unless ``force``;
- ``cases/<folder>/``: each case's full report; ``rows/<folder>.json``: its result row;
- ``cases.csv``, ``summary.json``, ``index.html``, ``folders.json``: written at the end from
  the rows, in cohort order.

A rerun over the same ``DIR`` skips every case whose row says ``ok``; failed cases run again.
"""

from __future__ import annotations

import contextlib
import json
import shutil
import sys
from dataclasses import dataclass, field
from pathlib import Path

from .. import CAUTION, __version__
from ..errors import InputError
from ..io import _output_lock, write_text
from . import rows as rowmod
from .cohort import read_cohort
from .page import audit_html
from .summary import summarise
from .task import read_row, row_path
from .workers import default_workers, run_dask, run_here, run_local

__all__ = ["AuditResult", "run_audit", "AUDIT_FORMAT", "EXPLAIN_OPTIONS"]

AUDIT_FORMAT = "culprit-lens-audit/1"

#: Options passed on to :func:`explain.explain_case` for every case.
EXPLAIN_OPTIONS = ("methods", "target", "baseline_hu", "points", "size", "pixel_mm", "seed",
                   "memory_budget_gb")


@dataclass(frozen=True)
class AuditResult:
    """What an audit wrote.

    Attributes
    ----------
    out_dir : Path
    summary : dict
        The content of summary.json.
    rows : tuple of dict
        The rows of cases.csv, in cohort order (values as Python objects).
    columns : tuple of str
        The columns of cases.csv.
    exit_status : int
        0 when every case is ok, 1 when some failed.
    """

    out_dir: Path
    summary: dict = field(repr=False)
    rows: tuple = field(repr=False)
    columns: tuple = field(repr=False)
    exit_status: int = 0

    def __repr__(self):
        c = self.summary["counts"]
        return (f"AuditResult({str(self.out_dir)!r}, {c['rows']} cases: {c['ok']} ok, "
                f"{c['failed']} failed)")


def _settings(options, methods):
    unknown = sorted(set(options) - set(EXPLAIN_OPTIONS))
    if unknown:
        raise InputError(f"run_audit: unknown option(s) {', '.join(unknown)}; expected "
                         f"{', '.join(EXPLAIN_OPTIONS)}")
    settings = {k: options.get(k) for k in EXPLAIN_OPTIONS}
    settings["methods"] = list(methods)
    settings["target"] = "auto" if settings["target"] is None else settings["target"]
    settings["baseline_hu"] = float(settings["baseline_hu"] or 0.0)
    settings["seed"] = int(settings["seed"] or 0)
    return settings


@contextlib.contextmanager
def _locked(out_dir):
    """The lock explain uses: ``.<name>.lock`` beside the folder, removed when released, so a
    refused or finished audit leaves nothing of its own in ``out_dir``."""
    out_dir.parent.mkdir(parents=True, exist_ok=True)
    with _output_lock(out_dir, "--out"):
        yield


def _prepare(out_dir, state, *, force):
    """Check a rerun's state against the folder's; clear what a forced or stale run left."""
    path = out_dir / "audit.json"
    old = None
    if path.is_file():
        try:
            old = json.loads(path.read_text(encoding="utf-8"))
        except ValueError:
            old = None
    # ``.audit.lock`` inside the folder: what runs of earlier versions left
    others = [p for p in out_dir.iterdir() if p.name != ".audit.lock"] if out_dir.is_dir() else []
    if old is None and others and not force:
        raise InputError(f"--out {out_dir}: exists, is not empty and holds no audit; choose a new "
                         "folder or pass --force to replace it")
    if old is not None and not force:
        for key in ("settings", "weights_hash", "cohort"):
            if old.get(key) != state[key]:
                raise InputError(
                    f"--out {out_dir}: holds an audit with other {key} ({old.get(key)!r}, now "
                    f"{state[key]!r}); pass --force to start it again, or choose another folder")
    if force:
        for p in others:
            shutil.rmtree(p) if p.is_dir() and not p.is_symlink() else p.unlink()
    cases = out_dir / "cases"
    if cases.is_dir():  # staging folders and lock files of a run that was killed
        for p in cases.iterdir():
            if p.name.startswith(".") and p.is_dir() and not p.is_symlink():
                shutil.rmtree(p, ignore_errors=True)
            elif p.name.startswith("."):
                p.unlink(missing_ok=True)
    out_dir.mkdir(parents=True, exist_ok=True)
    write_text(json.dumps(state, indent=2) + "\n", path)


def _tasks(cohort, out_dir, base, done):
    for r in cohort.rows:
        if r.folder in done:
            continue
        yield {**base, "manifest": str(r.manifest), "case": r.case, "case_id": r.case_id,
               "folder": r.folder, "out_dir": str(out_dir)}


def _progress(total, initial, quiet):
    if quiet:
        return None
    from tqdm import tqdm

    return tqdm(total=total, initial=initial, unit="case", file=sys.stderr, dynamic_ncols=True,
                desc="audit")


def _finish(out_dir, cohort, methods, state):
    names = rowmod.columns(methods, cohort.metadata_columns)
    meta_names = rowmod.metadata_names(cohort.metadata_columns, methods)
    rows = []
    for r in cohort.rows:
        row = read_row(row_path(out_dir, r.folder)) or rowmod.failed_row(
            case_id=r.case_id, case=r.case, seconds=None, methods=methods,
            error="no result was written for this case")
        row.pop("methods", None)
        row.update(zip(meta_names, (r.metadata[c] for c in cohort.metadata_columns)))
        row["_folder"] = r.folder
        rows.append(row)
    summary = summarise(rows, methods=methods)
    summary.update(settings=state["settings"], model=state["model"],
                   weights_hash=state["weights_hash"], library_version=__version__,
                   cohort=state["cohort"], caution=CAUTION)
    write_text(rowmod.rows_csv(rows, names), out_dir / "cases.csv")
    write_text(json.dumps(summary, indent=2, allow_nan=False) + "\n", out_dir / "summary.json")
    write_text(json.dumps({r.case_id: r.folder for r in cohort.rows}, indent=2) + "\n",
               out_dir / "folders.json")
    write_text(audit_html(summary, rows, methods=methods), out_dir / "index.html")
    return summary, rows, names


def run_audit(cohort_csv, model, out_dir, *, workers=None, scheduler=None, weights=None,
              grade_labels=None, force=False, quiet=True, **explain_options):
    """Explain every case of a cohort and write cases.csv, summary.json and index.html.

    Parameters
    ----------
    cohort_csv : str or Path
        CSV with a ``case`` column of case.json paths relative to it (see
        :func:`explain.audit.read_cohort`).
    model : str
        As ``--model``: ``builtin:reference``, a TorchScript file or ``FILE.py:FACTORY``; each
        worker loads it once.
    out_dir : str or Path
        New, empty, or an earlier audit of the same cohort, model and settings (resumed).
    workers : int, optional
        Local worker processes; default the CPUs available; 0 runs every case in this process.
    scheduler : str or distributed.Client, optional
        Run on this Dask cluster instead of local processes.
    weights, grade_labels : optional
        As for :func:`explain.load_model`.
    force : bool
        Start again over an audit with other settings (or any non-empty folder).
    quiet : bool
        No progress bar on stderr.
    **explain_options
        ``methods``, ``target``, ``baseline_hu``, ``points``, ``size``, ``pixel_mm``, ``seed``.

    Returns
    -------
    AuditResult
    """
    from ..model import load_model
    from ..report.explanation import _check_methods

    cohort = read_cohort(cohort_csv)
    methods = _check_methods(explain_options.get("methods"))
    settings = _settings(explain_options, methods)
    if workers is not None and (isinstance(workers, bool) or not isinstance(workers, int)
                                or workers < 0):
        raise InputError(f"--workers: expected a whole number >= 0, got {workers!r}")
    options = {} if grade_labels is None else {"grade_labels": tuple(grade_labels)}
    wrapped = load_model(model, weights=weights, **options)
    state = {"format": AUDIT_FORMAT, "cohort": str(Path(cohort_csv).resolve()),
             "model": {"spec": str(model), "weights": None if weights is None else str(weights),
                       "name": wrapped.name, "grade_labels": wrapped.grade_labels},
             "weights_hash": wrapped.weights_hash, "settings": settings}
    del wrapped  # workers load their own
    out_dir = Path(out_dir)
    if out_dir.exists() and not out_dir.is_dir():
        raise InputError(f"--out {out_dir}: exists and is not a folder; choose another path")
    with _locked(out_dir):
        _prepare(out_dir, state, force=force)
        done = {r.folder for r in cohort.rows
                if (read_row(row_path(out_dir, r.folder)) or {}).get("status") == "ok"}
        base = {"model": str(model), "weights": state["model"]["weights"],
                "grade_labels": None if grade_labels is None else list(grade_labels),
                "methods": list(methods),
                # no --methods: explain_case's defaults, so one that does not apply to this
                # model is skipped (with a note) instead of failing every case
                "explain_options": {**settings, "methods": None}
                if explain_options.get("methods") is None else settings}

        def died(task, reason):
            row = rowmod.failed_row(case_id=task["case_id"], case=task["case"], seconds=None,
                                    error=reason, methods=methods)
            write_text(json.dumps(row) + "\n", row_path(out_dir, task["folder"]))
            return row

        tasks = _tasks(cohort, out_dir, base, done)
        if scheduler is not None:
            stream = run_dask(tasks, scheduler=scheduler, died=died)
        elif workers == 0:
            stream = run_here(tasks, died=died)
        else:
            model_args = (str(model), base["weights"], base["grade_labels"])
            stream = run_local(tasks, workers=workers or default_workers(),
                               model_args=model_args, died=died)
        bar = _progress(len(cohort.rows), len(done), quiet)
        failed = 0
        for _, row in stream:
            failed += row["status"] != "ok"
            if bar is not None:
                bar.set_postfix(failed=failed, refresh=False)
                bar.update(1)
        if bar is not None:
            bar.close()
        summary, rows, names = _finish(out_dir, cohort, methods, state)
    status = 0 if summary["counts"]["failed"] == 0 else 1
    return AuditResult(out_dir=out_dir, summary=summary, rows=tuple(rows), columns=tuple(names),
                       exit_status=status)
