"""One case explained: :func:`explain_case` runs every step, :class:`Explanation` holds the result.

The steps, in order: sample the case's cross-sections as the model expects them, run the model,
fix the target at this patient, trace the segments (winners, leave-one-out, Shapley), compute each
saliency map, and locate each map along each segment (:mod:`explain.mapping`). Writing the
files (report.json, segments.csv, attributions.npz, overlays, figures, report.html) is
:meth:`Explanation.write`.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from .. import CAUTION, __version__
from ..errors import InputError, ModelError
from ..mapping import locate
from .wording import grade_phrase

__all__ = ["DEFAULT_METHODS", "OCCLUSION_WINDOW", "SegmentResult", "Explanation", "explain_case"]

#: Methods computed when none are named: the two the localisation checks use, and Grad-CAM.
DEFAULT_METHODS = ("integrated_gradients", "occlusion", "gradcam")

#: Occlusion window: cross-sections along the arc x pixels x pixels (clipped to the stack).
OCCLUSION_WINDOW = (4, 8, 8)

#: How each map's profile is aggregated per cross-section (see :mod:`explain.mapping`).
#: Gradients are sensitivities whose sign says which way HU would have to move, so their
#: magnitude counts (as in the saliency maps of Simonyan et al. 2014); the other methods are
#: contributions to the target, of which the positive part supports it.
AGGREGATES = {"gradient": "absolute", "smoothgrad": "absolute"}
DEFAULT_AGGREGATE = "positive"


def aggregate_of(method):
    """``"absolute"`` for gradient and smoothgrad, ``"positive"`` for the others."""
    return AGGREGATES.get(method, DEFAULT_AGGREGATE)

CAUTIONS = (
    CAUTION,
    "Explanations show what this model responded to, not where disease is; a map can look "
    "plausible for a wrong prediction.",
    "Models and demo data here are synthetic phantoms; results say nothing about real patients.",
)


@dataclass(frozen=True, eq=False)
class SegmentResult:
    """What the explanation says about one segment.

    Attributes
    ----------
    id, abbr, name, territory
        SCCT 2014 segment number, abbreviation, name, territory.
    length_mm : float
        Centerline length, mm.
    winning_channels : tuple of int
        Pooled channels whose maximum came from this segment.
    gradient, leave_one_out, shapley : float
        Contributions to the target, in the target's units (see :mod:`explain.attribution`).
    shapley_stderr : float or None
        Standard error when Shapley values were sampled, else None.
    reference_stenosis_percent : float or None
        From the case's reference, when it has one for this segment.
    locations : dict of str to Location
        Profile, peak and extent of each method's map.
    """

    id: int
    abbr: str
    name: str
    territory: str
    length_mm: float
    winning_channels: tuple
    gradient: float
    leave_one_out: float
    shapley: float
    shapley_stderr: float | None
    reference_stenosis_percent: float | None
    locations: dict = field(repr=False)

    @property
    def label(self):
        """``"7 (mLAD)"``."""
        return f"{self.id} ({self.abbr})"

    def __repr__(self):
        return (f"SegmentResult({self.label}, shapley={self.shapley:.4g}, "
                f"leave_one_out={self.leave_one_out:.4g}, {len(self.winning_channels)} channels)")


@dataclass(frozen=True, eq=False)
class Explanation:
    """An explained case, ready to be written.

    Attributes
    ----------
    case : explain.case.Case
        The case (its image gives the overlays their geometry).
    sections : explain.geometry.CaseSections
        The cross-sections the model saw.
    model : dict
        ``name``, ``weights_hash``, ``grade_labels`` of the model.
    settings : dict
        Every option used, the seed included.
    prediction : dict
        ``grade`` (label of the arg-max column; None when the model gives no grade labels, so
        that no report names a grade the model did not give), ``column`` (its index),
        ``scores`` (raw output per column label, or per column index without labels),
        ``probabilities`` (softmax of the scores).
    target : dict
        ``requested`` (as given), ``label`` (resolved), ``value`` (the target at this patient),
        ``value_all`` and ``value_none``: ``v(all segments)`` and ``v(no segment)`` of the
        segment trace (target units; their difference is the sum of the Shapley values).
    segments : tuple of SegmentResult
        Ascending SCCT number.
    culprit_index : int
        Index into ``segments`` of the segment with the largest Shapley value.
    margin : float
        Its Shapley value minus the second largest.
    maps : dict of str to (S, N, H, W) float32
        Each method's attribution on the cross-sections.
    cautions : tuple of str
    notes : tuple of str
    """

    case: object = field(repr=False)
    sections: object = field(repr=False)
    model: dict = field(repr=False)
    settings: dict = field(repr=False)
    prediction: dict = field(repr=False)
    target: dict = field(repr=False)
    segments: tuple = field(repr=False)
    culprit_index: int = 0
    margin: float = 0.0
    maps: dict = field(default_factory=dict, repr=False)
    cautions: tuple = CAUTIONS
    notes: tuple = ()

    @property
    def case_id(self):
        return self.case.case_id

    @property
    def methods(self):
        return tuple(self.maps)

    @property
    def culprit(self):
        """The culprit's :class:`SegmentResult`."""
        return self.segments[self.culprit_index]

    @property
    def culprit_label(self):
        """``"7 (mLAD)"``."""
        return self.culprit.label

    def __repr__(self):
        c = self.culprit
        where = []
        for method in self.methods:
            peak = c.locations[method].peak
            where.append(f"{method} {'-' if peak is None else f'{peak.arc_mm:.1f}'} mm")
        return (f"Explanation(case {self.case_id!r}, {grade_phrase(self.prediction)}, "
                f"culprit {c.label} margin {self.margin:.3g}, {len(self.segments)} segments, "
                f"peak along culprit: {', '.join(where) or 'no maps'})")

    def to_dict(self):
        """The content of report.json (format ``culprit-lens-report/1``) as plain Python."""
        from .jsonout import explanation_dict

        return explanation_dict(self)

    def write(self, out_dir, *, force=False, progress=None):
        """Write every output file into ``out_dir``; return the path of its report.html.

        The folder is built beside ``out_dir`` and moved into place when complete. An existing
        non-empty ``out_dir`` is refused (:class:`~explain.errors.InputError`) unless ``force``.
        """
        from ..io import atomic_output_dir
        from .files import write_into

        with atomic_output_dir(out_dir, force=force) as staging:
            write_into(self, staging, progress=progress)
        return Path(out_dir) / "report.html"


def _say(progress, message):
    if progress is not None:
        progress(message)


def _check_methods(methods):
    from ..attribution import METHODS

    if methods is None:
        return DEFAULT_METHODS
    if isinstance(methods, str):
        methods = tuple(m.strip() for m in methods.split(",") if m.strip())
    methods = tuple(methods)
    if not methods:
        raise InputError("methods: expected at least one saliency method, got none; choose from "
                         + ", ".join(METHODS))
    unknown = [m for m in methods if m not in METHODS]
    if unknown:
        raise InputError(f"methods: unknown {', '.join(map(repr, unknown))}; choose from "
                         + ", ".join(METHODS))
    if len(set(methods)) != len(methods):
        raise InputError(f"methods: {list(methods)} names a method twice; name each once")
    return methods


def method_settings(method, shape, *, seed):
    """The options each method runs with (recorded in the report's settings).

    Occlusion slides a window of :data:`OCCLUSION_WINDOW`, 4 cross-sections x 8 x 8 pixels
    (clipped to the stack's shape ``(N, H, W)``), by 2 cross-sections along the arc and a whole
    window in-plane: overlapping along the vessel locates the peak to about two cross-sections,
    at a cost a CPU bears for a full tree (about 2000 single-segment encoder runs for 15 segments of 32 x 24 x 24).
    """
    n, h, w = shape
    if method == "integrated_gradients":
        return {"steps": 50}
    if method == "occlusion":
        window = tuple(min(a, b) for a, b in zip(OCCLUSION_WINDOW, (n, h, w)))
        return {"window": window, "stride": (max(1, window[0] // 2), window[1], window[2])}
    if method == "smoothgrad":
        return {"n": 50, "noise": 0.15, "seed": seed}
    return {}


def _sampling(model, points, size, pixel_mm):
    """Explicit options win over the model's own cross-section spec."""
    spec = getattr(model, "spec", None)
    chosen = {
        "points": points if points is not None else getattr(spec, "points", None),
        "size": size if size is not None else getattr(spec, "size", None),
        "pixel_mm": pixel_mm if pixel_mm is not None else getattr(spec, "pixel_mm", None),
    }
    missing = [k for k, v in chosen.items() if v is None]
    if missing:
        raise InputError(
            f"{', '.join(missing)}: the model {getattr(model, 'name', '?')!r} states no "
            "cross-section sampling; give --points, --size and --pixel-mm")
    return chosen


def _graded_scores(output):
    """The output entry that holds the grade, as a (K,) tensor for the first patient."""
    if isinstance(output, dict):
        key = "grade" if "grade" in output else next(iter(output))
        output = output[key]
    return output.detach().reshape(output.shape[0], -1)[0].double()


def _check_grade_labels(output, grade_labels, model):
    """Refuse grade labels whose count is not the number of output columns."""
    if grade_labels is None:
        return
    k = _graded_scores(output).numel()
    if len(grade_labels) != k:
        raise ModelError(
            f"grade labels of model {getattr(model, 'name', '?')!r}: {len(grade_labels)} labels "
            f"{list(grade_labels)} for {k} output columns; give one label per column "
            "(--grade-labels, the sidecar <model>.spec.json, or the module's grade_labels)")


def _prediction(output, grade_labels):
    """``grade`` is the top column's label, or None when the model gives no grade labels."""
    import torch

    scores = _graded_scores(output)
    columns = [str(i) for i in range(scores.numel())]
    labels = columns if grade_labels is None else [str(g) for g in grade_labels]
    probs = torch.softmax(scores, dim=0)
    best = int(torch.argmax(scores))
    return {"grade": None if grade_labels is None else labels[best], "column": best,
            "scores": {lab: float(s) for lab, s in zip(labels, scores)},
            "probabilities": {lab: float(p) for lab, p in zip(labels, probs)}}


def _check_arguments(model, methods, seed, baseline_hu):
    """explain_case's cheap checks, before any work; returns (methods, baseline_hu as float)."""
    if not all(callable(getattr(model, name, None)) for name in ("encode", "head", "forward")):
        raise InputError(
            f"model: expected a wrapped model (explain.load_model or explain.wrap_model), got "
            f"{type(model).__name__}; wrap a torch module with explain.wrap_model(module)")
    methods = _check_methods(methods)
    if isinstance(seed, bool) or not isinstance(seed, (int, np.integer)):
        raise InputError(f"seed: expected an integer, got {seed!r}")
    try:
        baseline_hu = float(baseline_hu)
    except (TypeError, ValueError):
        raise InputError(f"baseline_hu: expected a number of HU, got {baseline_hu!r}") from None
    if not np.isfinite(baseline_hu):
        raise InputError(f"baseline_hu: expected a finite number of HU, got {baseline_hu}")
    return methods, baseline_hu


#: Which pass batch (explain.attribution.budget.PassBatches) each batched method uses.
_BATCH_OF = {"integrated_gradients": "integrated_gradients", "smoothgrad": "integrated_gradients",
             "occlusion": "occlusion"}


def _saliency_maps(model, x, methods, resolved, stack_shape, *, baseline_hu, seed, progress,
                   notes, batches=None):
    """One map per method, (S, N, H, W) float32, and the options each used; notes appended."""
    import torch

    from ..attribution import attribute

    maps, method_options = {}, {}
    for n, method in enumerate(methods, 1):
        _say(progress, f"saliency {n}/{len(methods)}: {method}")
        options = method_settings(method, stack_shape, seed=seed)
        method_options[method] = options
        torch.manual_seed(seed)
        batch = None if batches is None or method not in _BATCH_OF else getattr(
            batches, _BATCH_OF[method])
        if method == "integrated_gradients":
            result, delta = attribute(model, x, method=method, target=resolved,
                                      baseline_hu=baseline_hu, return_convergence_delta=True,
                                      internal_batch_size=batch, **options)
            notes.append(f"integrated_gradients: completeness gap (convergence delta) "
                         f"{float(delta[0]):.3g} target units")
        else:
            result = attribute(model, x, method=method, target=resolved,
                               baseline_hu=baseline_hu, internal_batch_size=batch, **options)
        maps[method] = result.detach().cpu().numpy()[0].astype(np.float32)
    return maps, method_options


def explain_case(model, case, *, methods=None, target="auto", points=None, size=None,
                 pixel_mm=None, baseline_hu=0.0, seed=0, progress=None,
                 memory_budget_gb=None):
    """Explain one case with a wrapped model.

    Parameters
    ----------
    model : explain.model.WrappedModel
        From :func:`explain.load_model` or :func:`explain.wrap_model`.
    case : explain.case.Case
        From :func:`explain.load_case`.
    methods : sequence of str, optional
        Saliency methods (:data:`explain.attribution.METHODS`); default :data:`DEFAULT_METHODS`.
    target : int or str
        Output column, ``"predicted"``, ``"expected"``, ``"auto"`` or ``"key:index"`` (dict
        outputs). ``"auto"``: the expected CAD-RADS category when the model's grade labels are
        CAD-RADS categories, else the predicted column (see :mod:`explain.model.targets`).
    points, size, pixel_mm : int, int, float, optional
        Cross-section sampling; default the model's spec (explicit values win).
    baseline_hu : float
        The "absent" value (baseline segment, occlusion fill, IG baseline), HU.
    seed : int
        Seeds torch before each sampled step (SmoothGrad noise, sampled Shapley values).
    progress : callable(str), optional
        Called with a short message before each long step.
    memory_budget_gb : float, optional
        Working memory the model passes may take, GB; None means
        :data:`~explain.attribution.budget.DEFAULT_MEMORY_BUDGET_GB` (1.0). It sets how many
        Integrated Gradients steps, occlusion windows and Shapley coalitions go through the
        model per call (:func:`~explain.attribution.budget.batches_for_budget`).

    Returns
    -------
    Explanation
    """
    import torch

    from ..attribution import trace_segments
    from ..attribution.budget import DEFAULT_MEMORY_BUDGET_GB, batches_for_budget, check_budget
    from ..geometry import sample_case
    from ..model.targets import resolve_target

    methods, baseline_hu = _check_arguments(model, methods, seed, baseline_hu)
    memory_budget_gb = check_budget(DEFAULT_MEMORY_BUDGET_GB if memory_budget_gb is None
                                    else memory_budget_gb, field="memory_budget_gb")
    sampling = _sampling(model, points, size, pixel_mm)

    _say(progress, f"sampling cross-sections of {len(case.segments)} segments "
                   f"({sampling['points']} x {sampling['size']}x{sampling['size']} px at "
                   f"{sampling['pixel_mm']:g} mm)")
    sections = sample_case(case, **sampling)
    x = sections.tensor()
    grade_labels = getattr(model, "grade_labels", None)
    with torch.no_grad():
        try:
            output = model.forward(x)
        except (RuntimeError, ValueError, TypeError) as exc:
            raise ModelError(f"model {getattr(model, 'name', '?')!r} failed on the case's "
                             f"cross-sections {tuple(x.shape)}: {str(exc).splitlines()[0]}") from None
    _check_grade_labels(output, grade_labels, model)
    resolved = resolve_target(output, target, grade_labels=grade_labels)
    with torch.no_grad():
        target_value = float(resolved(output)[0])

    batches = batches_for_budget(model, x, memory_budget_gb=memory_budget_gb)
    _say(progress, "tracing segments (winning channels, leave-one-out, Shapley)")
    trace = trace_segments(model, x, target=resolved, baseline_hu=baseline_hu, seed=int(seed),
                           internal_batch_size=batches.head)

    notes = list(case.notes)
    maps, method_options = _saliency_maps(model, x, methods, resolved, sections.values.shape[1:],
                                          baseline_hu=baseline_hu, seed=int(seed),
                                          progress=progress, notes=notes, batches=batches)

    _say(progress, "locating peaks along each segment")
    segments = _segment_results(case, sections, trace, maps)
    label = resolved.label
    settings = {
        "methods": list(methods), "target": target if isinstance(target, (int, str)) else label,
        **sampling, "rotation_deg": 0.0, "baseline_hu": baseline_hu, "seed": int(seed),
        "method_options": method_options, "profile_aggregate": {m: aggregate_of(m) for m in methods},
        "peak_pixel": "largest value in the peak cross-section, ties toward the centerline",
        "extent_rule": "contiguous run at or above half the peak profile value",
        "culprit_rule": "largest Shapley value over segments",
        "memory_budget_gb": memory_budget_gb,
        "batch_sizes": {k: getattr(batches, k) for k in ("integrated_gradients", "occlusion",
                                                         "head")},
        "library_version": __version__,
    }
    return Explanation(
        case=case, sections=sections,
        model={"name": getattr(model, "name", None),
               "weights_hash": getattr(model, "weights_hash", None),
               "grade_labels": None if grade_labels is None else [str(g) for g in grade_labels]},
        settings=settings, prediction=_prediction(output, grade_labels),
        target={"requested": settings["target"], "label": label, "value": target_value,
                "value_all": float(trace.value_all), "value_none": float(trace.value_empty)},
        segments=segments, culprit_index=int(trace.culprit), margin=float(trace.margin),
        maps=maps, notes=tuple(notes),
    )


def _segment_results(case, sections, trace, maps):
    """Per-segment contributions and locations, ascending SCCT number."""
    ref = getattr(case, "reference", None)
    stenosis = {} if ref is None else {int(k): float(v) for k, v in ref.stenosis_percent.items()}
    winners = np.asarray(trace.winners)
    stderr = getattr(trace, "shapley_stderr", None)
    by_id = {s.id: s for s in case.segments}
    results = []
    for s, (segment_id, cs) in enumerate(zip(sections.segment_ids, sections.sections)):
        seg = by_id[segment_id]
        locations = {m: locate(maps[m][s], cs.points_mm, cs.arc_mm, image=case.image,
                               aggregate=aggregate_of(m)) for m in maps}
        results.append(SegmentResult(
            id=int(segment_id), abbr=seg.abbr, name=seg.name, territory=seg.territory,
            length_mm=float(seg.centerline.length_mm),
            winning_channels=tuple(int(c) for c in np.flatnonzero(winners == s)),
            gradient=float(trace.gradient[s]), leave_one_out=float(trace.leave_one_out[s]),
            shapley=float(trace.shapley[s]),
            shapley_stderr=None if stderr is None else float(stderr[s]),
            reference_stenosis_percent=stenosis.get(int(segment_id)),
            locations=locations))
    return tuple(results)
