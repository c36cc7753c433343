"""The slow checks of one case: :func:`run_sanity` runs them, :class:`SanityCheck` holds them.

Two checks, each costing a full set of maps per step (see :mod:`explain.quality.sanity` and
:mod:`explain.quality.stability`): cascading randomisation of the model's layers, and the maps,
grade and culprit under rotation and centerline jitter. They run with the same sampling, target
and method options as a report (:func:`explain.report.explain_case`), so their numbers speak of
the maps a report shows. Writing sanity.json, the figure and the page is :meth:`SanityCheck.write`.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

from .. import CAUTION, __version__
from .explanation import _check_arguments, _sampling
from .method_options import arc_steps, inside_range, method_settings

__all__ = ["SANITY_FORMAT", "SanityCheck", "run_sanity"]

SANITY_FORMAT = "culprit-lens-sanity/1"


@dataclass(frozen=True, eq=False)
class SanityCheck:
    """Both slow checks of one case with one model.

    Attributes
    ----------
    case_id : str
    case_path : str
    model : dict
        ``name`` and ``weights_hash``.
    settings : dict
        Every option used, the seed included.
    randomisation : explain.quality.sanity.SanityResult
    stability : explain.quality.stability.StabilityResult or None
        None when stability was not asked for.
    """

    case_id: str
    case_path: str
    model: dict
    settings: dict = field(repr=False)
    randomisation: object = field(repr=False)
    stability: object = field(repr=False)

    def __repr__(self):
        return (f"SanityCheck(case {self.case_id!r}, {self.randomisation!r}, "
                f"{self.stability!r})")

    @property
    def passed(self):
        """Per method: True, False, or None (undefined); see the pass rule."""
        return self.randomisation.passed

    def to_dict(self):
        """The content of sanity.json (format ``culprit-lens-sanity/1``)."""
        from .jsonout import _plain

        return _plain({
            "format": SANITY_FORMAT,
            "caution": CAUTION,
            "case_id": self.case_id,
            "case": {"path": self.case_path},
            "model": dict(self.model),
            "settings": dict(self.settings),
            "randomisation": self.randomisation.to_dict(),
            "stability": None if self.stability is None else self.stability.to_dict(),
            "files": {"json": "sanity.json", "figure": "sanity.png", "html": "sanity.html"},
        })

    def write(self, out_dir, *, force=False):
        """Write sanity.json, sanity.png and sanity.html into ``out_dir`` (atomically).

        Returns
        -------
        Path
            ``out_dir / "sanity.html"``.
        """
        from ..io import atomic_output_dir
        from .sanity_page import write_sanity_into

        with atomic_output_dir(out_dir, force=force) as staging:
            write_sanity_into(self, staging)
        return Path(out_dir) / "sanity.html"


def _say(progress, message):
    if progress is not None:
        progress(message)


def run_sanity(model, case, *, methods=None, target="auto", points=None, size=None,
               pixel_mm=None, baseline_hu=0.0, seed=0, stability=True,
               rotations_deg=(0.0, 90.0, 180.0, 270.0), jitter_draws=3, jitter_rms_mm=0.5,
               progress=None):
    """Randomisation and stability checks of one case.

    Parameters
    ----------
    model : WrappedModel
    case : explain.case.Case
    methods, target, points, size, pixel_mm, baseline_hu, seed
        As for :func:`explain.report.explain_case` (the same defaults).
    stability : bool
        Also run the augmentations (rotation, jitter).
    rotations_deg : sequence of float
        Rotations about the tangent; 0 is the unaugmented run.
    jitter_draws : int
        Jittered copies of the case, each of ``jitter_rms_mm`` RMS lateral shift.
    jitter_rms_mm : float
    progress : callable(str), optional

    Returns
    -------
    SanityCheck

    Raises
    ------
    ModelError
        The model has no parameters (checked before any map is computed).
    """
    from ..attribution._common import fixed_target
    from ..geometry import sample_case
    from ..quality.maps import saliency_maps
    from ..quality.sanity import cascading_randomisation, check_has_parameters
    from ..quality.stability import augmentation_stability, check_augmentations

    methods, _, baseline_hu = _check_arguments(model, methods, seed, baseline_hu)
    check_has_parameters(model)
    if stability:
        check_augmentations(rotations_deg, jitter_draws, jitter_rms_mm, seed=seed)
    sampling, model = _sampling(model, points, size, pixel_mm, [])
    sections = sample_case(case, **sampling)
    x = sections.tensor()
    resolved = fixed_target(model, x, target)
    steps, range_hu = arc_steps(sections), inside_range(methods, sections, case)
    options = {m: method_settings(m, tuple(x.shape[2:]), seed=int(seed), arc_step_mm=steps,
                                  range_hu=range_hu) for m in methods}
    common = dict(methods=methods, target=resolved, method_options=options,
                  baseline_hu=baseline_hu, seed=int(seed))
    _say(progress, f"maps of the trained model ({', '.join(methods)})")
    original = saliency_maps(model, x, **common)
    randomisation = cascading_randomisation(model, x, original_maps=original, progress=progress,
                                            **common)
    result = None
    if stability:
        result = augmentation_stability(
            model, case, sampling=sampling, rotations_deg=rotations_deg,
            jitter_draws=jitter_draws, jitter_rms_mm=jitter_rms_mm, original_maps=original,
            progress=progress, **common)
    settings = {
        "methods": list(methods), "target": target if isinstance(target, (int, str)) else
        resolved.label, "target_label": resolved.label, **sampling, "baseline_hu": baseline_hu,
        "seed": int(seed), "method_options": options, "stability": bool(stability),
        "library_version": __version__,
    }
    return SanityCheck(
        case_id=case.case_id, case_path=str(case.path),
        model={"name": getattr(model, "name", None),
               "weights_hash": getattr(model, "weights_hash", None)},
        settings=settings, randomisation=randomisation, stability=result)
