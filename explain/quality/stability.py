"""Stability of the maps, the grade and the culprit under small changes of the input.

Two kinds of augmentation, each costing one model run, a segment trace and every map:

- rotation of every cross-section about the vessel's tangent (default 90, 180 and 270 degrees;
  0 degrees is the unaugmented run itself and is not repeated);
- lateral jitter of every centerline (:func:`explain.geometry.jitter.lateral_jitter`: a smooth
  seeded shift of about 0.5 mm RMS, each draw from ``numpy.random.default_rng([seed, draw])``).

Each augmented map is brought back onto the unaugmented cross-section grid: the position of
every original pixel is expressed in the augmented section's in-plane axes (cross-section ``n``
to cross-section ``n``) and the map is read there by bilinear interpolation; pixels that fall
outside the augmented square are left out. The comparison is the Spearman rank correlation of
the signed maps over the pixels both cover (as :mod:`explain.attribution.rotation` compares
rotations).

For test-time augmentation the result gives, per augmentation, the predicted grade (top output
column), the culprit (largest Shapley value) and the target, and over the augmentations the
share that agree with the unaugmented run and the mean target over all runs, the unaugmented one
included.
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass, field

import numpy as np
import torch
from scipy import ndimage

from ..attribution import trace_segments
from ..attribution._common import fixed_target
from ..errors import InputError
from ..geometry import sample_case
from ..geometry.jitter import lateral_jitter
from .maps import saliency_maps
from .similarity import spearman

__all__ = ["DEFAULT_ROTATIONS_DEG", "Run", "StabilityResult", "onto_grid", "jittered_case",
           "check_augmentations", "augmentation_stability"]

DEFAULT_ROTATIONS_DEG = (0.0, 90.0, 180.0, 270.0)


@dataclass(frozen=True)
class Run:
    """One run of the model: unaugmented or under one augmentation.

    ``spearman`` maps each method to its correlation with the unaugmented map (NaN with the
    reason in ``reasons`` when undefined); empty for the unaugmented run.
    """

    kind: str
    setting: float
    column: int
    grade: str | None
    culprit: int
    target: float
    spearman: dict = field(default_factory=dict)
    reasons: dict = field(default_factory=dict)

    def to_dict(self):
        return {"kind": self.kind, "setting": self.setting, "column": self.column,
                "grade": self.grade, "culprit": self.culprit, "target": self.target,
                "spearman": {m: None if np.isnan(v) else float(v)
                             for m, v in self.spearman.items()},
                "spearman_reasons": dict(self.reasons)}


@dataclass(frozen=True, eq=False)
class StabilityResult:
    """The unaugmented run, every augmented run, and how far they agree."""

    methods: tuple
    unaugmented: Run
    augmented: tuple
    settings: dict = field(repr=False)

    def _share(self, attr):
        if not self.augmented:
            return float("nan")
        ref = getattr(self.unaugmented, attr)
        return float(np.mean([getattr(r, attr) == ref for r in self.augmented]))

    @property
    def grade_agreement(self):
        """Share of augmented runs whose top output column is the unaugmented one."""
        return self._share("column")

    @property
    def culprit_agreement(self):
        """Share of augmented runs with the unaugmented culprit segment."""
        return self._share("culprit")

    @property
    def mean_target(self):
        """Mean target over every run, the unaugmented one included (the TTA estimate)."""
        return float(np.mean([r.target for r in (self.unaugmented, *self.augmented)]))

    def __repr__(self):
        return (f"StabilityResult({len(self.augmented)} augmentations: grade agreement "
                f"{self.grade_agreement:.2f}, culprit agreement {self.culprit_agreement:.2f}, "
                f"mean target {self.mean_target:.4g})")

    def to_dict(self):
        def num(v):
            return None if not np.isfinite(v) else float(v)

        targets = [r.target for r in (self.unaugmented, *self.augmented)]
        return {"settings": dict(self.settings), "unaugmented": self.unaugmented.to_dict(),
                "augmented": [r.to_dict() for r in self.augmented],
                "grade_agreement": num(self.grade_agreement),
                "culprit_agreement": num(self.culprit_agreement),
                "mean_target": num(self.mean_target),
                "target_sd": num(float(np.std(targets))) if len(targets) > 1 else None,
                "mean_spearman": {m: num(np.nanmean(v)) if np.isfinite(v).any() else None
                                  for m in self.methods
                                  for v in [np.array([r.spearman[m] for r in self.augmented])]}}


def onto_grid(values, points_from, points_to, pixel_mm):
    """Read a map given on one cross-section grid at the pixels of another.

    Parameters
    ----------
    values : (N, H, W) float
        The map on the ``points_from`` grid.
    points_from, points_to : (N, H, W, 3) float, mm
        Pixel positions of the two grids (e.g. rotated or jittered sections, and the originals).
    pixel_mm : float
        Pixel size of ``points_from``.

    Returns
    -------
    (out (N, H, W) float64, valid (N, H, W) bool)
        ``values`` read bilinearly at each ``points_to`` pixel, section ``n`` from section ``n``
        (its offset along the tangent is ignored), and whether that pixel lies in the square.
    """
    values = np.asarray(values, dtype=np.float64)
    n, h, w = values.shape
    p0 = points_from[:, 0, 0]
    u = (points_from[:, 0, -1] - p0) / ((w - 1) * pixel_mm)
    v = (points_from[:, -1, 0] - p0) / ((h - 1) * pixel_mm)
    d = points_to - p0[:, None, None]
    col = np.einsum("nhwc,nc->nhw", d, u) / pixel_mm
    row = np.einsum("nhwc,nc->nhw", d, v) / pixel_mm
    eps = 1e-6
    valid = (row >= -eps) & (row <= h - 1 + eps) & (col >= -eps) & (col <= w - 1 + eps)
    index = np.broadcast_to(np.arange(n, dtype=np.float64)[:, None, None], row.shape)
    coords = np.stack([index, np.clip(row, 0, h - 1), np.clip(col, 0, w - 1)])
    return ndimage.map_coordinates(values, coords, order=1, mode="nearest"), valid


def jittered_case(case, *, rms_mm, correlation_mm, rng):
    """``case`` with every centerline shifted by :func:`lateral_jitter` (radii dropped)."""
    segments = tuple(
        dataclasses.replace(s, centerline=lateral_jitter(
            s.centerline, rms_mm=rms_mm, correlation_mm=correlation_mm, rng=rng)[0],
            radius_mm=None)
        for s in case.segments)
    return dataclasses.replace(case, segments=segments)


def _top_column(output):
    scores = output["grade"] if isinstance(output, dict) and "grade" in output else output
    if isinstance(scores, dict):
        scores = next(iter(scores.values()))
    return int(torch.argmax(scores.detach().reshape(scores.shape[0], -1)[0]))


def _run(model, sections, *, kind, setting, methods, target, common, original=None, maps=None):
    """One run: prediction, culprit, target and maps; compared with ``original`` if given."""
    x = sections.tensor()
    with torch.no_grad():
        output = model.forward(x)
        value = float(target(output)[0])
    column = _top_column(output)
    labels = model.grade_labels
    trace = trace_segments(model, x, target=target, baseline_hu=common["baseline_hu"],
                           seed=common["seed"])
    if maps is None:
        maps = saliency_maps(model, x, methods=methods, target=target, **common)
    rho, why = {}, {}
    if original is not None:
        base_sections, base_maps = original
        for m in methods:
            parts = [onto_grid(maps[m][s], aug.points_mm, base.points_mm, aug.pixel_mm)
                     for s, (aug, base) in enumerate(zip(sections.sections, base_sections.sections))]
            back = np.stack([p[0] for p in parts])
            valid = np.stack([p[1] for p in parts])
            rho[m], why[m] = spearman(base_maps[m], back, valid=valid)
    run = Run(kind=kind, setting=float(setting), column=column,
              grade=None if labels is None else str(labels[column]),
              culprit=int(sections.segment_ids[int(trace.culprit)]), target=value,
              spearman=rho, reasons=why)
    return run, maps


def check_augmentations(rotations_deg, jitter_draws, jitter_rms_mm, *, seed=0):
    """Validate the augmentation options; return the angles that are not multiples of 360."""
    if isinstance(seed, bool) or not isinstance(seed, (int, np.integer)) or seed < 0:
        raise InputError(f"seed: the jitter draws need a whole number >= 0, got {seed!r}")
    try:
        angles = tuple(float(a) for a in rotations_deg)
    except (TypeError, ValueError):
        raise InputError(f"rotations: expected angles in degrees, got {rotations_deg!r}") from None
    if not all(np.isfinite(angles)):
        raise InputError(f"rotations: expected finite angles in degrees, got {list(angles)}")
    if isinstance(jitter_draws, bool) or not isinstance(jitter_draws, (int, np.integer)) \
            or jitter_draws < 0:
        raise InputError(f"jitter draws: expected a whole number >= 0, got {jitter_draws!r}")
    try:
        jitter_rms_mm = float(jitter_rms_mm)
    except (TypeError, ValueError):
        raise InputError(f"jitter: expected an RMS shift in mm, got {jitter_rms_mm!r}") from None
    if not np.isfinite(jitter_rms_mm) or jitter_rms_mm <= 0:
        raise InputError(f"jitter: expected an RMS shift > 0 mm, got {jitter_rms_mm!r}")
    return tuple(a for a in angles if a % 360.0 != 0.0)


def augmentation_stability(model, case, *, sampling, methods, target, method_options=None,
                           baseline_hu=0.0, seed=0, rotations_deg=DEFAULT_ROTATIONS_DEG,
                           jitter_draws=3, jitter_rms_mm=0.5, jitter_correlation_mm=5.0,
                           original_maps=None, progress=None):
    """Rerun the model, trace and maps under each augmentation; compare with the unaugmented run.

    Parameters
    ----------
    model : WrappedModel
    case : explain.case.Case
    sampling : dict
        ``points``, ``size``, ``pixel_mm`` of the cross-sections.
    methods : sequence of str
    target : Target or int or str
        Resolved once on the unaugmented output (:func:`explain.model.targets.resolve_target`)
        and kept for every run.
    method_options : dict of str to dict, optional
    baseline_hu : float
    seed : int
        Seeds the maps and traces (as in a report) and the jitter draws.
    rotations_deg : sequence of float
        Angles about the tangent; multiples of 360 are the unaugmented run and are skipped.
    jitter_draws : int
        Number of jittered copies of the case.
    jitter_rms_mm, jitter_correlation_mm : float
        See :func:`explain.geometry.jitter.lateral_jitter`.
    original_maps : dict of str to (S, N, H, W), optional
        The unaugmented maps, if already computed with the same options.
    progress : callable(str), optional

    Returns
    -------
    StabilityResult
    """
    angles = check_augmentations(rotations_deg, jitter_draws, jitter_rms_mm, seed=seed)
    methods = tuple(methods)
    common = dict(method_options=method_options, baseline_hu=baseline_hu, seed=int(seed))
    base_sections = sample_case(case, **sampling)
    target = fixed_target(model, base_sections.tensor(), target)
    kw = dict(methods=methods, target=target, common=common)
    unaugmented, base_maps = _run(model, base_sections, kind="none", setting=0.0,
                                  maps=original_maps, **kw)
    plans = [("rotation", a, lambda a=a: sample_case(case, **sampling, rotation_deg=a))
             for a in angles]
    plans += [("jitter", d, lambda d=d: sample_case(jittered_case(
        case, rms_mm=jitter_rms_mm, correlation_mm=jitter_correlation_mm,
        rng=np.random.default_rng([int(seed), d])), **sampling)) for d in range(jitter_draws)]
    runs = []
    for n, (kind, setting, sections) in enumerate(plans, 1):
        if progress is not None:
            progress(f"augmentation {n}/{len(plans)}: {kind} {setting:g}")
        runs.append(_run(model, sections(), kind=kind, setting=setting,
                         original=(base_sections, base_maps), **kw)[0])
    settings = {"rotations_deg": list(angles), "jitter_draws": int(jitter_draws),
                "jitter_rms_mm": float(jitter_rms_mm),
                "jitter_correlation_mm": float(jitter_correlation_mm),
                "jitter_seeds": [[int(seed), d] for d in range(jitter_draws)],
                "comparison": "Spearman of the signed maps on the unaugmented grid, over the "
                              "pixels both grids cover"}
    return StabilityResult(methods=methods, unaugmented=unaugmented, augmented=tuple(runs),
                           settings=settings)
