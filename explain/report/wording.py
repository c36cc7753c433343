"""How a report names the model's grade and target in words: the one place that decides.

A model's output columns carry a meaning only when the model gives grade labels (from the
command line's ``--grade-labels``, the sidecar ``<model>.spec.json``, or the module's
``grade_labels``). Without them a report must not say which CAD-RADS category the model gave:
column 5 is "5" in one model and "4B" in another. So every text that shows a grade (HTML,
terminal summaries, the Explanation's repr) asks this module, and it speaks of output columns
unless the column has a label, and of CAD-RADS only when that label is a CAD-RADS category.
"""

from __future__ import annotations

from ..grading import CATEGORIES

__all__ = ["grade_phrase", "verdict", "target_phrase", "target_unit"]


def _is_category(label):
    return label is not None and str(label).upper() in CATEGORIES


def grade_phrase(prediction):
    """The model's top column in words.

    Parameters
    ----------
    prediction : dict
        ``grade`` (label of the top column, or None when the model gives no labels) and
        ``column`` (its index), and ``entry`` (the dict key or tuple index of the output entry
    whose columns these are, None or absent for a plain tensor), as in report.json.

    Examples
    --------
    >>> grade_phrase({"grade": "4B", "column": 5})
    'CAD-RADS 4B (output column 5)'
    >>> grade_phrase({"grade": "dark", "column": 1})
    "grade 'dark' (output column 1)"
    >>> grade_phrase({"grade": None, "column": 5})
    'output column 5 has the top score (the model gives no grade labels)'
    >>> grade_phrase({"grade": None, "column": 0, "entry": 1})
    'column 0 of output 1 has the top score (the model gives no grade labels)'
    """
    label, column = prediction.get("grade"), prediction.get("column")
    entry = prediction.get("entry")
    where = f"output column {column}" if entry is None else f"column {column} of output {entry!r}"
    if label is None:
        return f"{where} has the top score (the model gives no grade labels)"
    if _is_category(label):
        return f"CAD-RADS {str(label).upper()} ({where})"
    return f"grade {str(label)!r} ({where})"


def verdict(prediction):
    """One sentence on what the model gave this case.

    Examples
    --------
    >>> verdict({"grade": "3", "column": 3})
    'The model graded this case CAD-RADS 3 (output column 3).'
    >>> verdict({"grade": None, "column": 5})
    'The model states no grade: output column 5 has the top score (the model gives no grade labels).'
    """
    if prediction.get("grade") is None:
        return f"The model states no grade: {grade_phrase(prediction)}."
    return f"The model graded this case {grade_phrase(prediction)}."


def target_phrase(label):
    """The resolved target (``Target.label``) in words.

    Examples
    --------
    >>> target_phrase(5)
    'output column 5'
    >>> target_phrase("grade:expected")
    'the expected CAD-RADS category of output grade'
    """
    if isinstance(label, int):
        return f"output column {label}"
    if str(label).split(":")[-1] == "expected":
        # "expected" resolves only when at least one grade label is a CAD-RADS category.
        key = str(label).rpartition(":")[0]
        return "the expected CAD-RADS category" + (f" of output {key}" if key else "")
    return f"output {label}"


def target_unit(label):
    """What one unit of the target is.

    Examples
    --------
    >>> target_unit("expected"), target_unit(3)
    ('CAD-RADS categories', 'target units')
    """
    return "CAD-RADS categories" if str(label).split(":")[-1] == "expected" else "target units"

