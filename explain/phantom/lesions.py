"""Lesions of a phantom: what the user asks for, and where it ends up on a segment.

A lesion narrows the lumen of one segment by a diameter stenosis ``d`` over a length ``L``
with a smooth profile: raised-cosine ramps at both ends and a flat middle third, so the lumen
radius is ``r0 (1 - d p(s))`` with ``p`` rising from 0 to 1 and back. The flat middle makes a
100 % lesion a closed stretch (a total occlusion) rather than a single closed point. Plaque
fills the space between the narrowed lumen and the original wall; an eccentric lesion pushes the
narrowed lumen against one side of the wall (a crescent of plaque), a concentric one keeps it
centred (a ring). The wall also bulges outwards by a quarter of its radius at the lesion's
middle (positive remodelling; common practice, no source) -- all round for a concentric lesion,
on the plaque side only for an eccentric one -- so a 0 % lesion is plaque without stenosis
(CAD-RADS 1).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ..anatomy import check_segment_id
from ..errors import InputError
from .tissue import CALCIFIED_PLAQUE_HU, SOFT_PLAQUE_HU

__all__ = ["KINDS", "LesionSpec", "PlacedLesion", "parse_lesion", "place_lesion", "lesion_profile"]

KINDS = ("calcified", "soft")
LENGTH_RANGE_MM = (6.0, 12.0)  # typical focal lesion lengths, common practice, no source
REMODELLING = 0.25  # outward bulge of the wall, fraction of its radius (no source)
END_MARGIN_MM = 1.0  # keep drawn lesions this far inside their segment


@dataclass(frozen=True)
class LesionSpec:
    """A lesion to draw.

    Attributes
    ----------
    segment : int
        SCCT 2014 segment number.
    percent : float
        Diameter stenosis at the lesion's middle, 0-100 (100 = total occlusion).
    kind : {"calcified", "soft"} or None
        Plaque type; None lets the seed choose.
    centre_mm, length_mm : float or None
        Arc position of the middle (from the segment's first centerline point) and the length;
        None lets the seed choose (length 6-12 mm, placed clear of branch origins).
    eccentric : bool or None
        Lumen pushed to one side (True) or centred (False); None lets the seed choose.
    """

    segment: int
    percent: float
    kind: str | None = None
    centre_mm: float | None = None
    length_mm: float | None = None
    eccentric: bool | None = None

    def __post_init__(self):
        object.__setattr__(self, "segment", check_segment_id(self.segment, field="lesion segment"))
        try:
            percent = float(self.percent)
        except (TypeError, ValueError):
            raise InputError(f"lesion percent: expected a number 0-100, got {self.percent!r}") from None
        if not math.isfinite(percent) or not 0.0 <= percent <= 100.0:
            raise InputError(f"lesion percent: a diameter stenosis lies in 0-100 %, got {self.percent!r}")
        object.__setattr__(self, "percent", percent)
        if self.kind is not None and self.kind not in KINDS:
            raise InputError(f"lesion kind: expected 'calcified' or 'soft', got {self.kind!r}")
        for name in ("centre_mm", "length_mm"):
            value = getattr(self, name)
            if value is not None and (not isinstance(value, (int, float)) or isinstance(value, bool)
                                      or not math.isfinite(value)):
                raise InputError(f"lesion {name}: expected a finite number of mm, got {value!r}")
        if self.length_mm is not None and self.length_mm <= 0:
            raise InputError(f"lesion length_mm: must be > 0 mm, got {self.length_mm!r}")

    def __str__(self):
        text = f"{self.segment}:{self.percent:g}"
        return text + (f":{self.kind}" if self.kind else "")


def parse_lesion(text):
    """Read a lesion written ``ID:PERCENT[:calcified|soft]``.

    Parameters
    ----------
    text : str
        E.g. ``"6:70"`` or ``"13:100:calcified"``.

    Returns
    -------
    LesionSpec

    Raises
    ------
    InputError
        When the text does not follow that form.

    Examples
    --------
    >>> parse_lesion("6:70:soft")
    LesionSpec(segment=6, percent=70.0, kind='soft', centre_mm=None, length_mm=None, eccentric=None)
    """
    hint = ("write ID:PERCENT[:calcified|soft], e.g. 6:70 or 13:100:calcified "
            "(ID an SCCT segment number 1-18, PERCENT a diameter stenosis 0-100)")
    if not isinstance(text, str):
        raise InputError(f"--lesion: expected text, got {type(text).__name__}; {hint}")
    parts = text.strip().split(":")
    if len(parts) not in (2, 3):
        raise InputError(f"--lesion {text!r}: expected 2 or 3 fields separated by ':'; {hint}")
    try:
        segment = int(parts[0])
    except ValueError:
        raise InputError(f"--lesion {text!r}: segment {parts[0]!r} is not a whole number; {hint}") from None
    try:
        percent = float(parts[1].rstrip("%"))
    except ValueError:
        raise InputError(f"--lesion {text!r}: percent {parts[1]!r} is not a number; {hint}") from None
    kind = parts[2].strip().lower() if len(parts) == 3 else None
    if kind is not None and kind not in KINDS:
        raise InputError(f"--lesion {text!r}: kind {parts[2]!r} is neither calcified nor soft; {hint}")
    try:
        return LesionSpec(segment, percent, kind)
    except InputError as exc:
        raise InputError(f"--lesion {text!r}: {exc}; {hint}") from None


@dataclass(frozen=True)
class PlacedLesion:
    """A lesion resolved on its segment: every choice made, every number in mm or HU."""

    segment: int
    percent: float
    kind: str
    start_mm: float
    end_mm: float
    eccentric: bool
    angle_deg: float
    plaque_hu: float

    @property
    def centre_mm(self):
        return 0.5 * (self.start_mm + self.end_mm)

    def summary(self):
        """``ID:PERCENT:kind``, the form :func:`parse_lesion` reads."""
        return f"{self.segment}:{self.percent:g}:{self.kind}"


def _free_intervals(length, blocked):
    """Pieces of ``[0, length]`` not covered by the ``blocked`` (lo, hi) intervals."""
    free, cursor = [], 0.0
    for lo, hi in sorted(blocked):
        if lo > cursor:
            free.append((cursor, lo))
        cursor = max(cursor, hi)
    if cursor < length:
        free.append((cursor, length))
    return free


def place_lesion(spec, path, rng):
    """Resolve a :class:`LesionSpec` on a :class:`~explain.phantom.layout.SegmentPath`.

    ``rng`` is the lesion's own stream; the same number of draws is made whatever the spec
    leaves open, so a choice made by hand does not change the others.

    Unset positions keep the lesion clear of the segment's ends and of branch origins, where the
    lumen of a neighbouring segment would fill it.
    """
    u_len, u_pos, u_kind, u_ecc, u_angle, u_hu = rng.uniform(size=6)
    length = path.length_mm
    kind = spec.kind or KINDS[int(u_kind < 0.5)]
    eccentric = bool(u_ecc < 0.6) if spec.eccentric is None else bool(spec.eccentric)
    lo_hu, hi_hu = CALCIFIED_PLAQUE_HU if kind == "calcified" else SOFT_PLAQUE_HU
    plaque_hu = round(lo_hu + (hi_hu - lo_hu) * u_hu, 1)
    if spec.centre_mm is not None:
        if not 0.0 <= spec.centre_mm <= length:
            raise InputError(f"lesion on segment {spec.segment}: centre_mm {spec.centre_mm} lies "
                             f"outside the segment (arc 0 to {length:.1f} mm)")
        size = spec.length_mm if spec.length_mm is not None else \
            LENGTH_RANGE_MM[0] + (LENGTH_RANGE_MM[1] - LENGTH_RANGE_MM[0]) * u_len
        centre = spec.centre_mm
        start, end = max(centre - size / 2, 0.0), min(centre + size / 2, length)
    else:
        blocked = [(-1.0, END_MARGIN_MM + path.start_clearance_mm),
                   (length - END_MARGIN_MM - max([r for _, _, r in path.branches], default=0.0),
                    length + 1.0)]
        blocked += [(a - r - END_MARGIN_MM, a + r + END_MARGIN_MM) for _, a, r in path.branches]
        free = _free_intervals(length, blocked) or [(0.0, length)]
        widest = max(hi - lo for lo, hi in free)
        size = spec.length_mm if spec.length_mm is not None else \
            LENGTH_RANGE_MM[0] + (LENGTH_RANGE_MM[1] - LENGTH_RANGE_MM[0]) * u_len
        size = min(size, widest)
        room = [(lo, hi - size) for lo, hi in free if hi - lo >= size]
        total = sum(hi - lo for lo, hi in room)
        pick = u_pos * total
        for lo, hi in room:
            if pick <= hi - lo or (lo, hi) == room[-1]:
                start = lo + min(pick, hi - lo)
                break
            pick -= hi - lo
        end = start + size
    return PlacedLesion(spec.segment, spec.percent, kind, round(float(start), 3),
                        round(float(end), 3), eccentric,
                        float(360.0 * u_angle), float(plaque_hu))


def lesion_profile(arc_mm, start_mm, end_mm):
    """Stenosis profile p(s): 0 outside the lesion, 1 on its middle third, cosine ramps between.

    Parameters
    ----------
    arc_mm : (n,) float
        Arc positions, mm.
    start_mm, end_mm : float
        The lesion's extent.

    Returns
    -------
    (n,) float64 in [0, 1]

    Examples
    --------
    >>> lesion_profile(np.array([0.0, 3.0, 4.5, 6.0, 9.0]), 0.0, 9.0).round(3).tolist()
    [0.0, 1.0, 1.0, 1.0, 0.0]
    >>> float(lesion_profile(np.array([1.5]), 0.0, 9.0)[0])
    0.5
    """
    arc = np.asarray(arc_mm, dtype=np.float64)
    half = 0.5 * (end_mm - start_mm)
    flat = half / 3.0
    off = np.abs(arc - 0.5 * (start_mm + end_mm))
    ramp = np.clip((off - flat) / (half - flat), 0.0, 1.0)
    return np.where(off <= half, 0.5 * (1.0 + np.cos(np.pi * ramp)), 0.0)


def remodelling_radius(radius_mm, profile):
    """Outer wall radius with the lesion's outward bulge (mm)."""
    return np.asarray(radius_mm) * (1.0 + REMODELLING * np.asarray(profile))
