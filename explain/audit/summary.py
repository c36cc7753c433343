"""The cohort's numbers: confusion matrix, accuracies, binary views with Wilson intervals, rates.

Binary views follow CAD-RADS 2.0 (Cury et al. 2022): *any disease* is category 1 or higher,
*obstructive disease* category 3 or higher (a stenosis of 50 % or more). Proportions carry the
Wilson score interval (Wilson 1927), which behaves at 0 and 1 and for small counts, unlike the
normal approximation.
"""

from __future__ import annotations

import math
import statistics

from ..grading import CATEGORIES

__all__ = ["wilson_interval", "proportion", "confusion_matrix", "binary_view", "summarise",
           "Z_95"]

#: Two-sided 95 % normal quantile, scipy.stats.norm.ppf(0.975).
Z_95 = 1.959963984540054


def wilson_interval(k, n, *, z=Z_95):
    """Wilson score interval of ``k`` successes in ``n`` trials (Wilson 1927).

    Returns
    -------
    (low, high) : float, or (None, None) when ``n`` is 0

    Examples
    --------
    >>> [round(v, 4) for v in wilson_interval(8, 10)]
    [0.4902, 0.9433]
    """
    if n == 0:
        return None, None
    p = k / n
    z2 = z * z
    centre = (p + z2 / (2 * n)) / (1 + z2 / n)
    half = z / (1 + z2 / n) * math.sqrt(p * (1 - p) / n + z2 / (4 * n * n))
    return max(0.0, centre - half), min(1.0, centre + half)


def proportion(k, n):
    """``{"k", "n", "value", "ci95"}`` of a proportion; ``value`` None when ``n`` is 0."""
    low, high = wilson_interval(k, n)
    return {"k": k, "n": n, "value": k / n if n else None, "ci95": [low, high]}


def _graded(rows):
    return [(r["reference_grade"], r["predicted_grade"]) for r in rows
            if r.get("status") == "ok" and r.get("reference_grade") in CATEGORIES
            and r.get("predicted_grade") in CATEGORIES]


def confusion_matrix(pairs):
    """7 x 7 counts: row = reference category, column = predicted, in CAD-RADS order."""
    matrix = [[0] * len(CATEGORIES) for _ in CATEGORIES]
    for ref, pred in pairs:
        matrix[CATEGORIES.index(ref)][CATEGORIES.index(pred)] += 1
    return matrix


def binary_view(pairs, threshold):
    """Sensitivity and specificity of "category >= ``threshold``" (a CAD-RADS category)."""
    cut = CATEGORIES.index(threshold)
    tp = fn = tn = fp = 0
    for ref, pred in pairs:
        truth, said = CATEGORIES.index(ref) >= cut, CATEGORIES.index(pred) >= cut
        tp += truth and said
        fn += truth and not said
        tn += (not truth) and (not said)
        fp += (not truth) and said
    return {"threshold": threshold, "tp": tp, "fn": fn, "tn": tn, "fp": fp,
            "sensitivity": proportion(tp, tp + fn), "specificity": proportion(tn, tn + fp)}


def _rate(rows, column):
    values = [r.get(column) for r in rows if r.get("status") == "ok"]
    known = [v for v in values if isinstance(v, bool)]
    return proportion(sum(known), len(known))


def _stats(rows, column):
    values = [float(r[column]) for r in rows if r.get("status") == "ok"
              and isinstance(r.get(column), (int, float)) and not isinstance(r.get(column), bool)
              and math.isfinite(float(r[column]))]
    if not values:
        return {"n": 0, "mean": None, "median": None}
    return {"n": len(values), "mean": statistics.fmean(values),
            "median": statistics.median(values)}


def _flag_counts(rows):
    counts = {}
    for r in rows:
        for flag in filter(None, (r.get("flags") or "").split(";")):
            counts[flag] = counts.get(flag, 0) + 1
    return dict(sorted(counts.items()))


def summarise(rows, *, methods):
    """summary.json's numbers from the result rows (dicts as :mod:`explain.audit.rows` makes).

    Returns
    -------
    dict
        ``counts``, ``confusion``, ``accuracy``, ``within_one``, ``binary``, ``culprit_hit_rate``,
        ``pointing_rate`` (per method), ``metrics`` (mean and median per numeric column) and
        ``flags`` (count per flag).
    """
    pairs = _graded(rows)
    ok = [r for r in rows if r.get("status") == "ok"]
    exact = sum(ref == pred for ref, pred in pairs)
    near = sum(abs(CATEGORIES.index(ref) - CATEGORIES.index(pred)) <= 1 for ref, pred in pairs)
    metric_columns = ["margin", "grade_error"] + [
        f"{m}_{what}" for m in methods for what in ("peak_error_mm", "relevance_mass")]
    return {
        "counts": {"rows": len(rows), "ok": len(ok),
                   "failed": sum(r.get("status") == "failed" for r in rows),
                   "with_reference": sum(r.get("reference_grade") is not None for r in ok),
                   "graded_pairs": len(pairs)},
        "confusion": {"labels": list(CATEGORIES), "rows": "reference", "columns": "predicted",
                      "matrix": confusion_matrix(pairs)},
        "accuracy": proportion(exact, len(pairs)),
        "within_one": proportion(near, len(pairs)),
        "binary": {"any_disease": binary_view(pairs, "1"),
                   "obstructive": binary_view(pairs, "3")},
        "culprit_hit_rate": _rate(rows, "culprit_hit"),
        "pointing_rate": {m: _rate(rows, f"{m}_pointing_hit") for m in methods},
        "metrics": {c: _stats(rows, c) for c in metric_columns},
        "flags": _flag_counts(rows),
    }
