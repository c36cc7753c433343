"""The settings of a quality assessment: defaults, what each means, and their checks.

Every threshold here is our own setting (common practice, no source) unless a source is named;
a user with another protocol or another taste for caution changes it. They are recorded in every
report (``quality.settings``).
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass, field

from ..attribution.trace import LOW_MARGIN_FRACTION
from ..errors import InputError

__all__ = ["FLAG_THRESHOLDS", "FLAG_NAMES", "QualitySettings", "check_settings", "quality_option"]

#: When each flag is raised (fractions of the culprit's positive attribution, or of
#: ``|v(all) - v(none)|`` for ``low_margin``). Our own settings, no source:
#: ``outside_vessel`` when more than half the mass lies beyond lumen + wall margin;
#: ``on_border`` when more than 40 % lies in the 2-pixel rim (a uniform map puts about 30 % of
#: a 24-pixel patch there); ``on_calcium`` when more than 25 % lies on pixels above
#: ``calcium_hu``; ``at_segment_end`` when more than half lies within ``end_mm`` of an end;
#: ``low_margin`` is the culprit rule of :func:`explain.attribution.trace.culprit_doubts`.
FLAG_THRESHOLDS = {
    "outside_vessel": 0.5,
    "on_border": 0.4,
    "on_calcium": 0.25,
    "at_segment_end": 0.5,
    "low_margin": LOW_MARGIN_FRACTION,
}
FLAG_NAMES = tuple(FLAG_THRESHOLDS)


@dataclass(frozen=True)
class QualitySettings:
    """Options of :func:`explain.quality.assess` (all lengths mm, intensities HU).

    Attributes
    ----------
    tolerance_mm : float
        Pointing tolerance, mm of arc and mm in the CT (default 3.0).
    wall_margin_mm : float
        Added to the lumen radius for "inside the vessel" (default 1.0 mm).
    calcium_hu : float
        Pixels above this are "bright calcium" (default 600 HU: above the enhanced lumen of
        about 350 HU aimed for in CCTA, Kawaguchi et al. 2014; the value itself is ours).
    rim_px : int
        Width of the patch border, pixels (default 2).
    end_mm : float
        "Near a segment end": within this arc of either end (default 2.0 mm).
    random_orders : int
        Seeded random orders of the faithfulness baselines (default 20).
    section_random_orders : int
        Seeded random pixel orders of the cross-section baseline (default 3: each costs
        ``2 x (section_steps + 1)`` encoder runs of one segment, so fewer than at the segment
        level, where orders cost only head runs).
    section_steps : int
        Steps of the cross-section deletion and insertion curves (default 20).
    section_fraction : float
        Share of the culprit's pixels deleted or inserted by the last step (default 0.2).
    flag_thresholds : dict of str to float
        See :data:`FLAG_THRESHOLDS`.
    """

    tolerance_mm: float = 3.0
    wall_margin_mm: float = 1.0
    calcium_hu: float = 600.0
    rim_px: int = 2
    end_mm: float = 2.0
    random_orders: int = 20
    section_random_orders: int = 3
    section_steps: int = 20
    section_fraction: float = 0.2
    flag_thresholds: dict = field(default_factory=lambda: dict(FLAG_THRESHOLDS))

    def to_dict(self):
        return asdict(self)


def _number(name, value, *, low=None, integer=False):
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value):
        raise InputError(f"{name}: expected a finite number, got {value!r}")
    if integer and int(value) != value:
        raise InputError(f"{name}: expected a whole number, got {value!r}")
    if low is not None and value < low:
        raise InputError(f"{name}: expected a value >= {low:g}, got {value!r}")
    return int(value) if integer else float(value)


def _thresholds(given):
    if given is None:
        return dict(FLAG_THRESHOLDS)
    if not isinstance(given, dict):
        raise InputError(f"flag_thresholds: expected a dict of flag name -> value, got {given!r}")
    out = dict(FLAG_THRESHOLDS)
    for name, value in given.items():
        if name not in FLAG_THRESHOLDS:
            raise InputError(f"flag threshold {name!r}: unknown flag; the flags are "
                             + ", ".join(FLAG_NAMES))
        out[name] = _number(f"flag threshold {name}", value, low=0.0)
    return out


def check_settings(**settings):
    """Validated :class:`QualitySettings`; any bad or unknown option is an InputError.

    Examples
    --------
    >>> check_settings(tolerance_mm=2).tolerance_mm
    2.0
    """
    known = QualitySettings.__dataclass_fields__
    unknown = sorted(set(settings) - set(known))
    if unknown:
        raise InputError(f"quality settings: unknown {', '.join(unknown)}; known are "
                         + ", ".join(known))
    d = QualitySettings()
    get = lambda name: settings.get(name, getattr(d, name))  # noqa: E731
    fraction = _number("section_fraction", get("section_fraction"), low=0.0)
    if not 0 < fraction <= 1:
        raise InputError(f"section_fraction: expected a share in (0, 1], got {fraction}")
    return QualitySettings(
        tolerance_mm=_number("tolerance_mm", get("tolerance_mm"), low=0.0),
        wall_margin_mm=_number("wall_margin_mm", get("wall_margin_mm"), low=0.0),
        calcium_hu=_number("calcium_hu", get("calcium_hu")),
        rim_px=_number("rim_px", get("rim_px"), low=0, integer=True),
        end_mm=_number("end_mm", get("end_mm"), low=0.0),
        random_orders=_number("random_orders", get("random_orders"), low=1, integer=True),
        section_random_orders=_number("section_random_orders", get("section_random_orders"),
                                      low=1, integer=True),
        section_steps=_number("section_steps", get("section_steps"), low=1, integer=True),
        section_fraction=fraction,
        flag_thresholds=_thresholds(settings.get("flag_thresholds")),
    )


def quality_option(quality):
    """``explain_case``'s ``quality``: None (skip) for False, else the settings dict, checked.

    Examples
    --------
    >>> quality_option(False) is None, quality_option(True)
    (True, {})
    """
    if quality is False or quality is None:
        return None
    settings = {} if quality is True else quality
    if not isinstance(settings, dict):
        raise InputError(f"quality: expected True, False or a dict of settings, got {quality!r}")
    check_settings(**settings)
    return dict(settings)
