"""One explanation assessed: localisation, mass shares, flags and faithfulness together."""

from __future__ import annotations

import time
from dataclasses import dataclass, field

from .faithfulness import faithfulness
from .flags import raise_flags
from .localisation import localisation
from .mass import REGION_NAMES, mass_fractions
from .settings import check_settings

__all__ = ["Assessment", "assess"]


@dataclass(frozen=True, eq=False)
class Assessment:
    """How far to trust one explanation (report.json's ``quality`` object).

    Attributes
    ----------
    settings : QualitySettings
    flags : tuple of str
        Raised flags (:data:`explain.quality.flags.FLAG_ORDER`).
    flag_methods : dict of str to list of str
        Methods behind each region flag.
    localisation : dict or None
        :func:`explain.quality.localisation`; None without a reference.
    mass : dict
        :func:`explain.quality.mass.mass_fractions`: ``per_segment``, ``culprit``, ``all_segments``.
    faithfulness : dict or None
        :func:`explain.quality.faithfulness.faithfulness`; None when no model was given.
    seconds : float
        Wall time of the assessment (not written to report.json, which stays reproducible).
    """

    settings: object
    flags: tuple
    flag_methods: dict = field(repr=False)
    localisation: dict | None = field(repr=False)
    mass: dict = field(repr=False)
    faithfulness: dict | None = field(repr=False)
    seconds: float = field(default=0.0, repr=False)

    def __repr__(self):
        local = self.localisation
        hit = "no reference" if local is None else f"culprit_hit={local['culprit_hit']}"
        faith = "no faithfulness" if self.faithfulness is None else (
            f"segment deletion AUC {self.faithfulness['segments']['deletion_auc']}")
        return f"Assessment(flags={list(self.flags)}, {hit}, {faith})"

    def to_dict(self):
        """Plain Python for report.json's ``quality`` (see docs/report-format.md)."""
        mass = self.mass
        return {
            "settings": self.settings.to_dict(),
            "flags": list(self.flags),
            "flag_methods": {k: list(v) for k, v in self.flag_methods.items()},
            "localisation": self.localisation,
            "mass": {"regions": list(REGION_NAMES), "culprit": mass["culprit"],
                     "all_segments": mass["all_segments"],
                     "per_segment": {str(k): v for k, v in mass["per_segment"].items()}},
            "faithfulness": self.faithfulness,
        }


def assess(explanation, case, *, model=None, target=None, **settings):
    """Assess one explanation.

    Parameters
    ----------
    explanation : explain.report.Explanation
    case : explain.case.Case
        The explained case (its reference, lumen radii, lesion mask).
    model : explain.model.WrappedModel, optional
        The explained model; without it there are no faithfulness curves.
    target : explain.model.targets.Target, optional
        The resolved target; default the explanation's target label.
    **settings
        :class:`explain.quality.settings.QualitySettings` fields (``tolerance_mm``,
        ``wall_margin_mm``, ``calcium_hu``, ``flag_thresholds``, ...).

    Returns
    -------
    Assessment
    """
    started = time.perf_counter()
    chosen = check_settings(**settings)
    mass = mass_fractions(explanation, case, settings=chosen)
    flags, flag_methods = raise_flags(explanation, mass["culprit"], settings=chosen)
    local = localisation(explanation, case, tolerance_mm=chosen.tolerance_mm)
    faith = None if model is None else faithfulness(explanation, model, target=target,
                                                     settings=chosen)
    return Assessment(settings=chosen, flags=tuple(flags), flag_methods=flag_methods,
                      localisation=local, mass=mass, faithfulness=faith,
                      seconds=time.perf_counter() - started)
