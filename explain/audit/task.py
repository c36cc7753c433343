"""The work of one case, as a worker does it: explain, write the case folder, write the row.

A task is a small picklable dict (paths, settings and the model's name), never arrays, so the
same function runs in a local worker process and on a Dask worker. Each worker process loads the
model once (:func:`worker_model`) and runs torch on one thread.

Everything a case leaves is written atomically: the case folder ``DIR/cases/<folder>/`` is built
beside its place and moved in, then the row ``DIR/rows/<folder>.json``. A case whose row exists
is finished; a folder without a row (a run killed between the two) is simply redone.
"""

from __future__ import annotations

import json
import threading
import time
from pathlib import Path

from ..errors import CulpritLensError
from ..io import write_text
from .rows import failed_row, report_row

__all__ = ["run_task", "worker_model", "row_path", "read_row"]

_MODELS = {}  # (thread, model, weights, labels) -> WrappedModel


def worker_model(model, weights=None, grade_labels=None, *, one_thread=True):
    """The wrapped model of this worker, loaded on first use; torch set to one thread.

    One copy per thread: saliency methods hook into the module, so two cases running in two
    threads of one Dask worker must not share it.
    """
    key = (threading.get_ident(), str(model), None if weights is None else str(weights),
           None if grade_labels is None else tuple(grade_labels))
    if key not in _MODELS:
        if one_thread:
            import torch

            torch.set_num_threads(1)
        from ..model import load_model

        options = {"weights": weights}
        if grade_labels is not None:
            options["grade_labels"] = tuple(grade_labels)
        _MODELS[key] = load_model(model, **options)
    return _MODELS[key]


def row_path(out_dir, folder):
    """Where the row of the case in ``folder`` is kept."""
    return Path(out_dir) / "rows" / f"{folder}.json"


def read_row(path):
    """A row written by :func:`run_task`, or None when absent or unreadable."""
    try:
        data = json.loads(Path(path).read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None
    return data if isinstance(data, dict) and "status" in data else None


def _explain(task, model):
    from ..case import load_case
    from ..report import explain_case

    case = load_case(task["manifest"])
    explanation = explain_case(model, case, **task["explain_options"])
    report = explanation.to_dict()
    explanation.write(Path(task["out_dir"]) / "cases" / task["folder"], force=True)
    return report


def run_task(task):
    """Explain one case and write its folder and row; return the row (never raises for the case).

    Parameters
    ----------
    task : dict
        ``manifest``, ``case`` (the cohort cell), ``case_id``, ``folder``, ``out_dir``,
        ``model``, ``weights``, ``grade_labels``, ``methods``, ``explain_options`` and
        ``one_thread`` (false when the cases run in the caller's own process).

    Returns
    -------
    dict
        The row (see :mod:`explain.audit.rows`), also written to ``DIR/rows/<folder>.json``.
    """
    start = time.perf_counter()
    ids = {"case_id": task["case_id"], "case": task["case"], "methods": task["methods"]}
    try:
        model = worker_model(task["model"], task.get("weights"), task.get("grade_labels"),
                             one_thread=task.get("one_thread", True))
        report = _explain(task, model)
        row = report_row(report, seconds=round(time.perf_counter() - start, 3), **ids)
    except (CulpritLensError, OSError, RuntimeError, ValueError, TypeError, KeyError,
            IndexError, MemoryError) as exc:
        # one case's failure is that case's row, and the run goes on
        reason = str(exc) or type(exc).__name__
        if not isinstance(exc, CulpritLensError):
            reason = f"{type(exc).__name__}: {reason}"
        row = failed_row(seconds=round(time.perf_counter() - start, 3), error=reason, **ids)
    write_text(json.dumps(row, allow_nan=False) + "\n", row_path(task["out_dir"], task["folder"]))
    return row
