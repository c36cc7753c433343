"""One result row per cohort row: the columns of ``cases.csv`` and how a report fills them.

A row is built from the case's report dict (``report.json``, :mod:`explain.report.jsonout`)
and the quality object in it (:mod:`explain.quality`), never from the explanation's arrays, so a
worker returns a few dozen numbers and strings, however large the case.
"""

from __future__ import annotations

import csv
import io
import math

from ..attribution.trace import culprit_doubts
from ..grading import CATEGORIES

__all__ = ["base_columns", "columns", "report_row", "failed_row", "grade_error", "rows_csv",
           "reference_culprit", "along_arc_localisation"]

_FIRST = ("case_id", "case", "status", "error", "seconds", "reference_grade", "predicted_grade",
          "grade_error", "culprit", "reference_culprit", "culprit_hit", "margin")
_PER_METHOD = ("pointing_hit", "peak_error_mm", "relevance_mass")


def base_columns(methods):
    """Our columns, in order, for these saliency methods (metadata columns follow them)."""
    per_method = [f"{m}_{what}" for m in methods for what in _PER_METHOD]
    return list(_FIRST) + per_method + ["flags"]


def metadata_names(metadata_columns, methods):
    """Column names of the cohort's metadata; a name that clashes with ours gets ``cohort_``."""
    ours = set(base_columns(methods))
    return [f"cohort_{c}" if c in ours else c for c in metadata_columns]


def columns(methods, metadata_columns):
    """Every column of ``cases.csv``."""
    return base_columns(methods) + metadata_names(metadata_columns, methods)


def grade_error(reference, predicted):
    """Signed steps from ``reference`` to ``predicted`` in 0, 1, 2, 3, 4A, 4B, 5, or None.

    Examples
    --------
    >>> grade_error("4A", "2"), grade_error("0", "5"), grade_error("N", "2")
    (-2, 6, None)
    """
    if reference not in CATEGORIES or predicted not in CATEGORIES:
        return None
    return CATEGORIES.index(predicted) - CATEGORIES.index(reference)


def reference_culprit(report):
    """SCCT id of the segment of highest reference stenosis (lowest id on ties), or None."""
    ref = report.get("reference") or {}
    stenosis = {int(k): v for k, v in (ref.get("stenosis_percent") or {}).items()
                if v is not None}
    ids = [s["id"] for s in report.get("segments", [])]
    stenosis = {k: v for k, v in stenosis.items() if k in ids}
    if not stenosis or max(stenosis.values()) <= 0:
        return None
    top = max(stenosis.values())
    return min(k for k, v in stenosis.items() if v == top)


def along_arc_localisation(report, method):
    """Where ``method``'s culprit peak lies against the reference lesions, along the arc.

    Used when the report carries no ``quality`` object. The peak is the method's peak on the
    explained culprit (``culprit.where[method].arc_mm``); the lesions are the reference lesions
    on that same segment, each the closed arc interval [``start_mm``, ``end_mm``].

    Returns
    -------
    (pointing_hit, peak_error_mm) : (bool or None, float or None)
        ``pointing_hit`` is true when the peak lies in a lesion's interval; ``peak_error_mm`` is
        the arc distance in mm from the peak to the nearest interval (0 inside one). Both None
        without a reference, with no lesion on the segment, or with no peak.

    Examples
    --------
    >>> rep = {"culprit": {"segment_id": 2, "where": {"g": {"arc_mm": 12.0}}},
    ...        "reference": {"lesions": [{"segment": 2, "start_mm": 15.0, "end_mm": 20.0}]}}
    >>> along_arc_localisation(rep, "g")
    (False, 3.0)
    """
    culprit = report.get("culprit") or {}
    peak = ((culprit.get("where") or {}).get(method) or {}).get("arc_mm")
    lesions = [(float(l["start_mm"]), float(l["end_mm"]))
               for l in ((report.get("reference") or {}).get("lesions") or ())
               if int(l.get("segment", -1)) == culprit.get("segment_id")]
    if peak is None or not lesions:
        return None, None
    error = min(max(start - peak, peak - end, 0.0) for start, end in lesions)
    return error == 0.0, error


def _predicted_grade(report):
    grade = (report.get("prediction") or {}).get("grade")
    labels = (report.get("model") or {}).get("grade_labels")
    # only a model whose columns are labelled with categories states a CAD-RADS grade
    return grade if labels and grade in CATEGORIES else None


def report_row(report, *, case_id, case, seconds, methods):
    """The result row of an explained case, from its report dict."""
    ref = report.get("reference") or {}
    quality = report.get("quality") or {}
    local = quality.get("localisation") or {}
    reference_grade = ref.get("grade")
    predicted = _predicted_grade(report)
    culprit = report["culprit"]
    row = {
        "case_id": case_id, "case": case, "status": "ok", "error": "", "seconds": seconds,
        "reference_grade": reference_grade, "predicted_grade": predicted,
        "grade_error": grade_error(reference_grade, predicted),
        "culprit": culprit["segment_id"], "reference_culprit": reference_culprit(report),
        "culprit_hit": local.get("culprit_hit"), "margin": culprit.get("margin"),
    }
    if not quality and row["reference_culprit"] is not None:
        row["culprit_hit"] = row["culprit"] == row["reference_culprit"]
    for m in methods:
        if quality:
            row[f"{m}_pointing_hit"] = (local.get("pointing_hit") or {}).get(m)
            row[f"{m}_peak_error_mm"] = (local.get("peak_error_mm") or {}).get(m)
        else:
            row[f"{m}_pointing_hit"], row[f"{m}_peak_error_mm"] = along_arc_localisation(report, m)
        row[f"{m}_relevance_mass"] = (local.get("relevance_mass") or {}).get(m)
    row["flags"] = ";".join(quality.get("flags") if quality else _doubts(report))
    return row


def _doubts(report):
    """Without a quality object: the culprit's doubts by the shared rule (``culprit_doubts``)."""
    target = report.get("target") or {}
    if target.get("value_all") is None or target.get("value_none") is None:
        return ()
    return culprit_doubts([s["shapley"] for s in report.get("segments", ())],
                          report["culprit"]["margin"], target["value_all"], target["value_none"])


def failed_row(*, case_id, case, seconds, error, methods):
    """The row of a case that could not be explained; ``error`` is cut to one line."""
    row = {c: None for c in base_columns(methods)}
    line = " ".join(str(error).split()) or "unknown error"
    row.update(case_id=case_id, case=case, status="failed", error=line, seconds=seconds,
               flags="")
    return row


def _cell(value):
    if value is None:
        return ""
    if isinstance(value, bool):
        return "yes" if value else "no"
    if isinstance(value, float):
        return "" if not math.isfinite(value) else f"{value:.6g}"
    return str(value)


def rows_csv(rows, names):
    """CSV text of ``rows`` (dicts) with the columns ``names``; booleans as yes/no."""
    buffer = io.StringIO()
    writer = csv.writer(buffer, lineterminator="\n")
    writer.writerow(names)
    for row in rows:
        writer.writerow([_cell(row.get(n)) for n in names])
    return buffer.getvalue()
