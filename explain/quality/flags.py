"""Named warnings about one explanation: the flags of a report's ``quality.flags``.

A flag is raised when a share of the culprit's attribution passes its threshold
(:data:`explain.quality.settings.FLAG_THRESHOLDS`) for at least one method, or when the culprit
itself is in doubt by the one culprit rule, :func:`explain.attribution.trace.culprit_doubts`
(``no_positive_segment``, ``low_margin``).
"""

from __future__ import annotations

from ..attribution.trace import culprit_doubts

__all__ = ["FLAG_ORDER", "raise_flags"]

#: Every flag, in the order reports list them.
FLAG_ORDER = ("no_positive_segment", "low_margin", "outside_vessel", "on_border", "on_calcium",
              "at_segment_end")

# region share -> flag, and whether the flag is about the share outside the region
_FROM_REGION = {"outside_vessel": ("inside_vessel", True), "on_border": ("border", False),
                "on_calcium": ("calcium", False), "at_segment_end": ("segment_end", False)}


def raise_flags(explanation, culprit_shares, *, settings):
    """The flags of one explanation and the methods behind each region flag.

    Parameters
    ----------
    explanation : explain.report.Explanation
    culprit_shares : dict
        {method: {region: share or None}} on the culprit (:func:`explain.quality.mass.mass_fractions`).
    settings : explain.quality.settings.QualitySettings

    Returns
    -------
    flags : list of str
        In :data:`FLAG_ORDER`.
    methods : dict of str to list of str
        For each raised region flag, the methods that passed its threshold.
    """
    e = explanation
    thresholds = settings.flag_thresholds
    raised = set()
    if e.target.get("value_all") is not None and e.target.get("value_none") is not None:
        raised.update(culprit_doubts([s.shapley for s in e.segments], e.margin,
                                     e.target["value_all"], e.target["value_none"],
                                     fraction=thresholds["low_margin"]))
    methods = {}
    for flag, (region, outside) in _FROM_REGION.items():
        hit = []
        for m, shares in culprit_shares.items():
            share = shares.get(region)
            if share is None:
                continue
            if (1.0 - share if outside else share) > thresholds[flag]:
                hit.append(m)
        if hit:
            raised.add(flag)
            methods[flag] = hit
    return [f for f in FLAG_ORDER if f in raised], methods

