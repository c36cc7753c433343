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

__all__ = ["grade_phrase", "verdict", "target_phrase", "target_unit", "culprit_statement",
           "FLAG_WORDS", "flag_sentence", "culprit_summary"]


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



def culprit_statement(label, doubts, *, low_margin=0.10):
    """What the report says about the culprit: named as the driver only when nothing doubts it.

    Parameters
    ----------
    label : str
        ``"7 (mLAD)"``.
    doubts : sequence of str
        From :func:`explain.attribution.trace.culprit_doubts`.
    low_margin : float
        The share used by the ``low_margin`` rule.

    Examples
    --------
    >>> culprit_statement("7 (mLAD)", ())
    'Segment 7 (mLAD) drove the target.'
    >>> culprit_statement("7 (mLAD)", ("low_margin",))[:60]
    'Inconclusive: segment 7 (mLAD) leads, but its margin over th'
    """
    if "no_positive_segment" in doubts:
        return ("Inconclusive: no segment raised the target (every segment's Shapley value is "
                f"zero or negative), so no segment is named as its cause; {label} has the "
                "largest value.")
    if "low_margin" in doubts:
        return (f"Inconclusive: segment {label} leads, but its margin over the next segment is "
                f"under {low_margin:.0%} of the whole change the segments make to the target, "
                "so it is not named as the cause with any certainty.")
    return f"Segment {label} drove the target."


#: Each quality flag in plain words; ``{...}`` are quality settings (docs/report-format.md).
FLAG_WORDS = {
    "no_positive_segment": "No segment raised the target: every segment's Shapley value is "
                           "zero or negative.",
    "low_margin": "The culprit is barely ahead of the next segment: its margin is under "
                  "{low_margin:.0%} of the whole change the segments make to the target.",
    "outside_vessel": "Most of the map on the culprit lies outside the vessel (beyond the "
                      "lumen radius plus {wall_margin_mm:g} mm) for {methods}.",
    "on_border": "Much of the map on the culprit lies on the border of the cross-sections "
                 "(the outer {rim_px} pixels) for {methods}: the model may respond to the "
                 "patch edge.",
    "on_calcium": "Much of the map on the culprit lies on bright pixels above {calcium_hu:g} "
                  "HU (calcium or other dense material) for {methods}.",
    "at_segment_end": "Much of the map on the culprit lies within {end_mm:g} mm of a segment "
                      "end for {methods}: the model may respond to where a segment starts or "
                      "stops.",
}


def flag_sentence(flag, settings, methods=()):
    """One flag in plain words.

    Parameters
    ----------
    flag : str
    settings : dict
        report.json's ``quality.settings``.
    methods : sequence of str
        The methods behind a region flag.

    Examples
    --------
    >>> flag_sentence("on_calcium", {"calcium_hu": 600.0, "flag_thresholds": {}}, ["occlusion"])
    'Much of the map on the culprit lies on bright pixels above 600 HU (calcium or other dense material) for occlusion.'
    """
    values = {**settings, "low_margin": settings.get("flag_thresholds", {}).get("low_margin", 0.1),
              "methods": ", ".join(methods) or "at least one method"}
    return FLAG_WORDS[flag].format(**values)


def culprit_summary(explanation):
    """The terminal's culprit line, inconclusive in plain words when the culprit is in doubt."""
    from .jsonout import doubts_of, low_margin_fraction

    e = explanation
    line = culprit_statement(e.culprit_label, doubts_of(e), low_margin=low_margin_fraction(e))
    quality = getattr(e, "quality", None)
    if quality is not None:
        line += f" Quality flags: {', '.join(quality.flags) or 'none'}."
    return line
