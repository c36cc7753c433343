"""Coronary segments by their SCCT 2014 number.

Source: Leipsic J et al., "SCCT guidelines for the interpretation and reporting of coronary CT
angiography", J Cardiovasc Comput Tomogr 2014;8:342-358 (segments 1-15 follow the AHA model,
Austen WG et al., Circulation 1975). Segment 17 is the ramus intermedius, 18 the posterolateral
branch from the LCx; the ramus has no fixed territory, so its territory is a setting.
"""

from __future__ import annotations

from dataclasses import dataclass

from .errors import InputError

__all__ = [
    "SegmentInfo",
    "SEGMENT_TABLE",
    "TERRITORIES",
    "RAMUS_ID",
    "LEFT_MAIN_ID",
    "segment_info",
    "check_segment_id",
]

#: Vessel territories; the left main is kept apart because CAD-RADS treats it apart.
TERRITORIES = ("LM", "LAD", "LCx", "RCA")

RAMUS_ID = 17
LEFT_MAIN_ID = 5


@dataclass(frozen=True)
class SegmentInfo:
    """One SCCT 2014 coronary segment.

    Attributes
    ----------
    id : int
        Segment number, 1-18.
    abbr : str
        Short label, e.g. ``"pLAD"``.
    name : str
        Plain name, e.g. ``"proximal left anterior descending"``.
    territory : str
        One of :data:`TERRITORIES`.
    """

    id: int
    abbr: str
    name: str
    territory: str


# id: (abbreviation, name, territory); territory None for the ramus (a setting).
_ROWS = {
    1: ("pRCA", "proximal right coronary artery", "RCA"),
    2: ("mRCA", "mid right coronary artery", "RCA"),
    3: ("dRCA", "distal right coronary artery", "RCA"),
    4: ("R-PDA", "posterior descending artery from the RCA", "RCA"),
    5: ("LM", "left main", "LM"),
    6: ("pLAD", "proximal left anterior descending", "LAD"),
    7: ("mLAD", "mid left anterior descending", "LAD"),
    8: ("dLAD", "distal left anterior descending", "LAD"),
    9: ("D1", "first diagonal", "LAD"),
    10: ("D2", "second diagonal", "LAD"),
    11: ("pCx", "proximal circumflex", "LCx"),
    12: ("OM1", "first obtuse marginal", "LCx"),
    13: ("LCx", "mid and distal circumflex", "LCx"),
    14: ("OM2", "second obtuse marginal", "LCx"),
    15: ("L-PDA", "posterior descending artery from the LCx", "LCx"),
    16: ("R-PLB", "posterolateral branch from the RCA", "RCA"),
    17: ("RI", "ramus intermedius", None),
    18: ("L-PLB", "posterolateral branch from the LCx", "LCx"),
}

#: The table with the ramus counted in the LCx territory (the common default).
SEGMENT_TABLE = {
    i: SegmentInfo(i, abbr, name, territory or "LCx") for i, (abbr, name, territory) in _ROWS.items()
}


def check_segment_id(segment_id, *, field="segment id"):
    """Return ``segment_id`` as an int, or raise :class:`InputError` naming ``field``.

    Parameters
    ----------
    segment_id : int
        An SCCT 2014 segment number.
    field : str
        Where the value came from, for the message (e.g. ``"case.json: segments[2].id"``).
    """
    if isinstance(segment_id, bool) or not isinstance(segment_id, (int, str)):
        raise InputError(f"{field}: expected an SCCT segment number 1-18, got {segment_id!r}")
    try:
        number = int(segment_id)
    except ValueError:
        raise InputError(
            f"{field}: expected an SCCT segment number 1-18, got {segment_id!r}"
        ) from None
    if number not in _ROWS:
        raise InputError(
            f"{field}: SCCT segment numbers run from 1 to 18, got {number}; "
            "renumber the segment by the SCCT 2014 table"
        )
    return number


def segment_info(segment_id, *, ramus_territory="LCx"):
    """Look up one segment by its SCCT 2014 number.

    Parameters
    ----------
    segment_id : int
        Segment number 1-18.
    ramus_territory : {"LAD", "LCx"}
        Territory to give the ramus intermedius (segment 17), which has no fixed one.

    Returns
    -------
    SegmentInfo

    Examples
    --------
    >>> segment_info(6).abbr
    'pLAD'
    >>> segment_info(17, ramus_territory="LAD").territory
    'LAD'
    """
    number = check_segment_id(segment_id)
    if ramus_territory not in ("LAD", "LCx"):
        raise InputError(f"ramus_territory: expected 'LAD' or 'LCx', got {ramus_territory!r}")
    abbr, name, territory = _ROWS[number]
    return SegmentInfo(number, abbr, name, territory or ramus_territory)
