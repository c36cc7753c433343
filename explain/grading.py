"""CAD-RADS 2.0 stenosis categories from per-segment diameter stenosis.

Source: Cury RC et al., "CAD-RADS 2.0 - 2022 Coronary Artery Disease-Reporting and Data System",
J Cardiovasc Comput Tomogr 2022;16:536-557. A patient's category comes from the most severe
diameter stenosis: 0 (0 %), 1 (1-24 % or plaque without stenosis), 2 (25-49 %), 3 (50-69 %),
4A (70-99 % in one or two vessels), 4B (left main >= 50 %, or >= 70 % in all three of the LAD,
LCx and RCA territories), 5 (100 %, total occlusion). The left-main bound is read as >= 50 %
(the guideline's wording leaves ``>=`` against ``>`` open; we choose ``>=`` and test 50 % exactly).
"""

from __future__ import annotations

import math
from collections.abc import Mapping

from .anatomy import LEFT_MAIN_ID, segment_info
from .errors import InputError

__all__ = ["CATEGORIES", "category_rank", "cadrads_category", "plaque_burden"]

#: Stenosis categories in order of severity (N, non-diagnostic, is outside this order).
CATEGORIES = ("0", "1", "2", "3", "4A", "4B", "5")


def category_rank(category):
    """Position of a category in :data:`CATEGORIES` (0 for "0" ... 6 for "5").

    Examples
    --------
    >>> category_rank("4B")
    5
    """
    try:
        return CATEGORIES.index(str(category).upper())
    except ValueError:
        raise InputError(
            f"CAD-RADS category: expected one of {', '.join(CATEGORIES)}, got {category!r}"
        ) from None


def _band(percent):
    """Category of a single stenosis, before the multi-vessel rules."""
    if percent >= 100:
        return "5"
    if percent >= 70:
        return "4A"
    if percent >= 50:
        return "3"
    if percent >= 25:
        return "2"
    if percent > 0:
        return "1"
    return "0"


def cadrads_category(stenosis_percent, *, plaque=False, ramus_territory="LCx"):
    """CAD-RADS 2.0 category from the diameter stenosis of each segment.

    Parameters
    ----------
    stenosis_percent : mapping of int to float
        SCCT segment number -> diameter stenosis in percent, 0-100. Segments left out count as 0 %.
    plaque : bool
        Whether plaque without stenosis is present (makes an all-zero case category 1).
    ramus_territory : {"LAD", "LCx"}
        Territory counted for the ramus intermedius (segment 17) in the three-vessel rule.

    Returns
    -------
    str
        One of :data:`CATEGORIES`.

    Examples
    --------
    >>> cadrads_category({6: 40.0, 1: 10.0})
    '2'
    >>> cadrads_category({5: 50.0})
    '4B'
    >>> cadrads_category({7: 75, 13: 80, 2: 90})
    '4B'
    """
    if not isinstance(stenosis_percent, Mapping):
        raise InputError(
            f"stenosis_percent: expected a mapping of segment number to percent, "
            f"got {type(stenosis_percent).__name__}"
        )
    worst = "1" if plaque else "0"
    territories_70 = set()
    left_main_50 = False
    for segment_id, value in stenosis_percent.items():
        info = segment_info(segment_id, ramus_territory=ramus_territory)
        try:
            percent = float(value)
        except (TypeError, ValueError):
            raise InputError(
                f"stenosis_percent[{segment_id}]: expected a number of percent, got {value!r}"
            ) from None
        if not math.isfinite(percent) or not 0.0 <= percent <= 100.0:
            raise InputError(
                f"stenosis_percent[{segment_id}]: a diameter stenosis lies in 0-100 %, got {value!r}"
            )
        band = _band(percent)
        if category_rank(band) > category_rank(worst):
            worst = band
        if info.id == LEFT_MAIN_ID and percent >= 50.0:
            left_main_50 = True
        if percent >= 70.0 and info.territory in ("LAD", "LCx", "RCA"):
            territories_70.add(info.territory)
    if worst == "5":
        return "5"
    if left_main_50 or len(territories_70) == 3:
        return "4B"
    return worst


def plaque_burden(calcium_score):
    """CAD-RADS 2.0 plaque-burden modifier from the Agatston calcium score.

    Bands: P1 1-100, P2 101-300, P3 301-999, P4 >= 1000 (Cury et al. 2022). A score of 0 has no
    modifier and returns ``None``.

    Examples
    --------
    >>> plaque_burden(1000)
    'P4'
    >>> plaque_burden(0) is None
    True
    """
    score = float(calcium_score)
    if not math.isfinite(score) or score < 0:
        raise InputError(f"calcium_score: expected a finite score >= 0, got {calcium_score!r}")
    if score == 0:
        return None
    if score <= 100:
        return "P1"
    if score <= 300:
        return "P2"
    if score < 1000:
        return "P3"
    return "P4"
