"""One case explained: :func:`explain_case` runs every step, :class:`Explanation` holds the result.

The steps, in order: sample the case's cross-sections as the model expects them, run the model,
fix the target at this patient, trace the segments (winners, leave-one-out, Shapley), compute each
saliency map, and locate each map along each segment (:mod:`explain.mapping`). Writing the
files (report.json, segments.csv, attributions.npz, overlays, figures, report.html) is
:meth:`Explanation.write`.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace
from pathlib import Path

import numpy as np

from .. import CAUTION, __version__
from ..errors import InputError, ModelError
from ..mapping import locate
from ..quality.settings import quality_option
from .method_options import (OCCLUSION_WINDOW_MM, OCCLUSION_WINDOW_PIXELS, arc_steps,
                             inside_range, method_settings)
from .wording import grade_phrase

__all__ = ["DEFAULT_METHODS", "OCCLUSION_WINDOW_MM", "OCCLUSION_WINDOW_PIXELS", "SegmentResult", "Explanation", "explain_case"]

#: Methods computed when none are named: the two the localisation checks use, and Grad-CAM.
DEFAULT_METHODS = ("integrated_gradients", "occlusion", "gradcam")

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
    gradient_x_feature, leave_one_out, shapley : float
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
    gradient_x_feature: float
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
    tied_with : tuple of int
        SCCT numbers of segments whose Shapley value is level with the culprit's (within
        :data:`explain.attribution.trace.TIE_RTOL` of ``|v(all) - v(none)|``); the culprit is
        then the lowest SCCT number among them, and the report says so.
    maps : dict of str to (S, N, H, W) float32
        Each method's attribution on the cross-sections.
    cautions : tuple of str
    notes : tuple of str
    quality : explain.quality.Assessment or None
        How far to trust this explanation (:func:`explain.quality.assess`); None when
        ``explain_case(..., quality=False)``.
    warnings : tuple of str
        Findings that should change how far the explanation is trusted (for example an
        Integrated Gradients completeness gap above
        :data:`explain.attribution.integrated.COMPLETENESS_SHARE`).
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
    quality: object = field(default=None, repr=False)
    tied_with: tuple = ()
    warnings: tuple = ()

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
        """The content of report.json (format ``culprit-lens-report/2``) as plain Python."""
        from .jsonout import explanation_dict

        return explanation_dict(self)

    def write(self, out_dir, *, force=False, progress=None, dicom=True):
        """Write every output file into ``out_dir``; return the path of its report.html.

        The folder is built beside ``out_dir`` and moved into place when complete. An existing
        non-empty ``out_dir`` is refused (:class:`~explain.errors.InputError`) unless ``force``.
        With ``dicom`` (the default) a case read from a DICOM series also gets its DICOM
        objects in ``overlays/dicom/`` (:func:`explain.report.write_dicom`).
        """
        from ..io import atomic_output_dir
        from .files import write_into

        with atomic_output_dir(out_dir, force=force) as staging:
            write_into(self, staging, progress=progress, dicom=dicom)
        return Path(out_dir) / "report.html"


def _say(progress, message):
    if progress is not None:
        progress(message)


def _check_methods(methods):
    """The methods to run: the checked names, or :data:`DEFAULT_METHODS` for None."""
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


_OPTION = {"points": "--points (points)", "size": "--size (size)",
           "pixel_mm": "--pixel-mm (pixel_mm)"}


def _sampling(model, points, size, pixel_mm, notes):
    """Explicit options win over the model's own cross-section spec; a conflict is noted.

    Returns the sampling and the model (with its spec replaced when an option overrode it).
    """
    from ..model.spec import CrossSectionSpec

    spec = getattr(model, "spec", None)
    given = {"points": points, "size": size, "pixel_mm": pixel_mm}
    chosen = {k: v if v is not None else getattr(spec, k, None) for k, v in given.items()}
    missing = [k for k, v in chosen.items() if v is None]
    if missing:
        raise InputError(
            f"{', '.join(missing)}: the model {getattr(model, 'name', '?')!r} states no "
            "cross-section sampling; give --points, --size and --pixel-mm")
    conflicts = [f"{_OPTION[k]} {v:g} conflicts with the model's spec ({getattr(spec, k):g})"
                 for k, v in given.items() if spec is not None and v is not None
                 and float(v) != float(getattr(spec, k))]
    if conflicts:
        notes.append("sampling: " + "; ".join(conflicts) + "; the value you gave wins, and the "
                     "model is run on cross-sections sampled that way")
        if hasattr(model, "with_spec"):
            model = model.with_spec(CrossSectionSpec(**chosen))
    return chosen, model


def _graded_scores(output, resolved):
    """The output entry the target explains, as a (K,) float64 tensor for the first patient."""
    from ..model.targets import output_entry

    entry = output_entry(output, resolved.key)
    return entry.detach().reshape(entry.shape[0], -1)[0].double()


def _check_grade_labels(output, resolved, grade_labels, model):
    """Refuse grade labels whose count is not the number of the explained entry's columns."""
    if grade_labels is None:
        return
    k = _graded_scores(output, resolved).numel()
    if len(grade_labels) != k:
        where = "" if resolved.key is None else f" (output entry {resolved.key!r})"
        raise ModelError(
            f"grade labels of model {getattr(model, 'name', '?')!r}: {len(grade_labels)} labels "
            f"{list(grade_labels)} for {k} output columns{where}; give one label per column "
            "(--grade-labels, the sidecar <model>.spec.json, or the module's grade_labels)")


def _prediction(output, resolved, grade_labels):
    """``grade`` is the top column's label, or None when the model gives no grade labels.

    The columns are those of the output entry the target explains (``entry``: its key or
    index, None for a plain tensor output), never an entry picked silently.
    """
    import torch

    scores = _graded_scores(output, resolved)
    columns = [str(i) for i in range(scores.numel())]
    labels = columns if grade_labels is None else [str(g) for g in grade_labels]
    probs = torch.softmax(scores, dim=0)
    best = int(torch.argmax(scores))
    return {"grade": None if grade_labels is None else labels[best], "column": best,
            "entry": resolved.key,
            "scores": {lab: float(s) for lab, s in zip(labels, scores)},
            "probabilities": {lab: float(p) for lab, p in zip(labels, probs)}}


def _check_arguments(model, methods, seed, baseline_hu):
    """explain_case's cheap checks, before any work; returns (methods, named, baseline_hu)."""
    if not all(callable(getattr(model, name, None)) for name in ("encode", "head", "forward")):
        raise InputError(
            f"model: expected a wrapped model (explain.load_model or explain.wrap_model), got "
            f"{type(model).__name__}; wrap a torch module with explain.wrap_model(module)")
    named = methods is not None
    methods = _check_methods(methods)
    if isinstance(seed, bool) or not isinstance(seed, (int, np.integer)):
        raise InputError(f"seed: expected an integer, got {seed!r}")
    try:
        baseline_hu = float(baseline_hu)
    except (TypeError, ValueError):
        raise InputError(f"baseline_hu: expected a number of HU, got {baseline_hu!r}") from None
    if not np.isfinite(baseline_hu):
        raise InputError(f"baseline_hu: expected a finite number of HU, got {baseline_hu}")
    return methods, named, baseline_hu


def _run_model(model, x, notes):
    """The model's output on the case; a failure names the shape and any sampling conflict."""
    import torch

    with torch.no_grad():
        try:
            return model.forward(x)
        except (RuntimeError, ValueError, TypeError, IndexError) as exc:
            conflict = [n for n in notes if n.startswith("sampling: ")]
            hint = (f" ({conflict[0]}; leave the option out to sample as the model's spec says)"
                    if conflict else "")
            text = str(exc).strip()
            cause = text.splitlines()[0] if text else type(exc).__name__
            raise ModelError(f"model {getattr(model, 'name', '?')!r} failed on the case's "
                             f"cross-sections {tuple(x.shape)}{hint}: {cause}") from None


def _output_and_target(model, x, target, grade_labels, notes):
    """The model's output on the case, the resolved target and its value (a note when the
    target had to assume something)."""
    import torch

    from ..model.targets import resolve_target, target_note

    output = _run_model(model, x, notes)
    resolved = resolve_target(output, target, grade_labels=grade_labels)
    _check_grade_labels(output, resolved, grade_labels, model)
    note = target_note(output, target, resolved)
    if note:
        notes.append(note)
    with torch.no_grad():
        return output, resolved, float(resolved(output)[0])


def _methods_to_run(model, x, methods, named, sections, case, *, gradcam_layer, seed, notes):
    """(methods, options per method, skipped method -> reason), checked before any map."""
    from .saliency import usable_methods

    methods, found, skipped = usable_methods(model, x, methods, named=named,
                                             gradcam_layer=gradcam_layer, notes=notes)
    stack_shape, steps = sections.values.shape[1:], arc_steps(sections)
    range_hu = inside_range(methods, sections, case)
    options = {m: {**method_settings(m, stack_shape, seed=seed, arc_step_mm=steps,
                                     range_hu=range_hu), **found.get(m, {})}
               for m in methods}
    return methods, options, skipped


def explain_case(model, case, *, methods=None, target="auto", points=None, size=None,
                 pixel_mm=None, baseline_hu=0.0, seed=0, gradcam_layer=None, progress=None,
                 quality=True, memory_budget_gb=None):
    """Explain one case with a wrapped model.

    Parameters
    ----------
    model : explain.model.WrappedModel
        From :func:`explain.load_model` or :func:`explain.wrap_model`.
    case : explain.case.Case
        From :func:`explain.load_case`.
    methods : sequence of str, optional
        Saliency methods (:data:`explain.attribution.METHODS`); default :data:`DEFAULT_METHODS`,
        of which any that does not apply to the model is skipped with the reason in ``notes``
        (a method named here that does not apply is an error).
    target : int or str
        Output column, ``"predicted"``, ``"expected"``, ``"auto"``, or ``"key:..."`` /
        ``"index:..."`` for dict / tuple and list outputs. ``"auto"``: the expected CAD-RADS
        category when the model's grade labels are CAD-RADS categories, else the predicted
        column (see :mod:`explain.model.targets` and docs/your-model.md).
    points, size, pixel_mm : int, int, float, optional
        Cross-section sampling; default the model's spec (explicit values win, and a value that
        conflicts with the spec is noted).
    baseline_hu : float
        The "absent" value (baseline segment, occlusion fill, IG baseline), HU.
    seed : int
        Seeds torch before each sampled step (SmoothGrad noise, sampled Shapley values).
    gradcam_layer : str, optional
        Dotted name of the Grad-CAM layer; default the module's ``cam_layer``, else its last
        convolution. Its stride and offset are worked out from the model's layers where they
        allow it (:func:`explain.attribution.gradcam.resolve_geometry`).
    progress : callable(str), optional
        Called with a short message before each long step.
    quality : bool or dict
        Assess the explanation (:func:`explain.quality.assess`: localisation, mass shares,
        flags, faithfulness curves); a dict gives its settings. False skips it.
    memory_budget_gb : float, optional
        Working memory the model passes may take, GB; None means
        :data:`~explain.attribution.budget.DEFAULT_MEMORY_BUDGET_GB` (0.5). It sets how many
        Integrated Gradients steps, occlusion windows and Shapley coalitions go through the
        model per call (:func:`~explain.attribution.budget.batches_for_budget`).

    Returns
    -------
    Explanation
    """
    from ..attribution import trace_segments
    from ..attribution.budget import DEFAULT_MEMORY_BUDGET_GB, batches_for_budget, check_budget
    from ..geometry import sample_case
    from .saliency import saliency_maps

    methods, named, baseline_hu = _check_arguments(model, methods, seed, baseline_hu)
    quality_settings = quality_option(quality)
    notes = []  # this run's notes; the case's and the model's (read at the end) come first
    sampling, model = _sampling(model, points, size, pixel_mm, notes)
    memory_budget_gb = check_budget(DEFAULT_MEMORY_BUDGET_GB if memory_budget_gb is None
                                    else memory_budget_gb, field="memory_budget_gb")

    _say(progress, f"sampling cross-sections of {len(case.segments)} segments "
                   f"({sampling['points']} x {sampling['size']}x{sampling['size']} px at "
                   f"{sampling['pixel_mm']:g} mm)")
    sections = sample_case(case, **sampling)
    x = sections.tensor()
    grade_labels = getattr(model, "grade_labels", None)
    output, resolved, target_value = _output_and_target(model, x, target, grade_labels, notes)
    # cheap checks of the methods (Grad-CAM's layer) before the expensive steps
    methods, method_options, skipped = _methods_to_run(
        model, x, methods, named, sections, case, gradcam_layer=gradcam_layer, seed=int(seed),
        notes=notes)

    batches = batches_for_budget(model, x, memory_budget_gb=memory_budget_gb)
    _say(progress, "tracing segments (winning channels, leave-one-out, Shapley)")
    trace = trace_segments(model, x, target=resolved, baseline_hu=baseline_hu, seed=int(seed),
                           internal_batch_size=batches.head)

    notes.extend(_trace_notes(trace, sections.segment_ids))
    warnings = []
    maps = saliency_maps(model, x, methods, resolved, method_options, baseline_hu=baseline_hu,
                         seed=int(seed), progress=progress, notes=notes, warnings=warnings,
                         batches=batches)

    _say(progress, "locating peaks along each segment")
    segments = _segment_results(case, sections, trace, maps)
    label = resolved.label
    settings = _settings(methods, target, label, sampling, baseline_hu, seed, method_options,
                         trace, skipped, memory_budget_gb, batches)
    explanation = Explanation(
        case=case, sections=sections,
        model=_model_dict(model, grade_labels),
        settings=settings, prediction=_prediction(output, resolved, grade_labels),
        target={"requested": settings["target"], "label": label, "value": target_value,
                "value_all": float(trace.value_all), "value_none": float(trace.value_empty)},
        segments=segments, culprit_index=int(trace.culprit), margin=float(trace.margin),
        maps=maps, notes=tuple(case.notes) + tuple(getattr(model, "notes", ())) + tuple(notes),
        tied_with=tuple(int(sections.segment_ids[i]) for i in trace.tied),
        warnings=tuple(warnings),
    )
    if quality_settings is None:
        return explanation
    from ..quality import assess

    _say(progress, "assessing the explanation (localisation, mass shares, faithfulness)")
    return replace(explanation, quality=assess(explanation, case, model=model, target=resolved,
                                               **quality_settings))


def _model_dict(model, grade_labels):
    """report.json's ``model``: name, weights hash, how it was split, grade labels."""
    return {"name": getattr(model, "name", None),
            "weights_hash": getattr(model, "weights_hash", None),
            "kind": getattr(model, "kind", None),
            "grade_labels": None if grade_labels is None else [str(g) for g in grade_labels]}


def _settings(methods, target, label, sampling, baseline_hu, seed, method_options, trace,
              skipped, memory_budget_gb, batches):
    """Every option and rule the explanation used, for the report's settings."""
    from ..attribution.trace import TIE_RTOL

    return {
        "methods": list(methods), "target": target if isinstance(target, (int, str)) else label,
        **sampling, "rotation_deg": 0.0, "baseline_hu": baseline_hu, "seed": int(seed),
        "method_options": method_options, "skipped_methods": skipped,
        "profile_aggregate": {m: aggregate_of(m) for m in methods},
        "peak_pixel": "largest value in the peak cross-section, ties toward the centerline",
        "extent_rule": "contiguous run at or above half the peak profile value",
        "culprit_rule": f"largest Shapley value over segments; values within {TIE_RTOL:g} x "
                        "|v(all) - v(none)| of it are a tie, named at the lowest SCCT number",
        "shapley": _shapley_kind(trace), "coalition_values": trace.value_dtype,
        "memory_budget_gb": memory_budget_gb,
        "batch_sizes": {k: getattr(batches, k) for k in ("integrated_gradients", "occlusion",
                                                         "head")},
        "library_version": __version__,
    }


def _shapley_kind(trace):
    """``"exact"`` (all 2^S coalitions) or how the values were sampled."""
    if trace.shapley_stderr is None:
        return "exact over all coalitions of segments"
    return (f"sampled: {trace.n_permutations} permutations (seed {trace.seed}); standard error "
            "per segment in shapley_stderr")


def _trace_notes(trace, segment_ids):
    """Notes on a culprit tie and on the precision of the coalition values."""
    from ..attribution.trace import TIE_RTOL

    notes = []
    if trace.tied:
        level = ", ".join(str(segment_ids[i]) for i in trace.tied)
        notes.append(f"culprit tie: segment(s) {level} have a Shapley value level with segment "
                     f"{segment_ids[trace.culprit]} (within {TIE_RTOL:g} of |v(all) - v(none)|); "
                     "the lowest SCCT number is named, but the model does not single one out")
    if trace.precision_note:
        notes.append(trace.precision_note)
    return notes


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
            gradient_x_feature=float(trace.gradient_x_feature[s]),
            leave_one_out=float(trace.leave_one_out[s]),
            shapley=float(trace.shapley[s]),
            shapley_stderr=None if stderr is None else float(stderr[s]),
            reference_stenosis_percent=stenosis.get(int(segment_id)),
            locations=locations))
    return tuple(results)
