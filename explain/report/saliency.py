"""The saliency step of :func:`explain.report.explain_case`: which methods apply, then their maps.

Cheap checks come first, before any map is computed: Grad-CAM's layer is found, reached by the
encoder and checked for the cross-section layout (:func:`explain.attribution.gradcam.check_layer`),
and its stride and offset are worked out. When the user named no methods, a default method that
does not apply is skipped, with the reason in the notes; a method the user named stays an error.

The maps are then computed from the cheapest method to the dearest (gradients, Grad-CAM,
SmoothGrad, Integrated Gradients, occlusion). A method that fails raises
:class:`MethodFailed`, which keeps the maps finished before it (``finished_maps``), so that no
finished work is thrown away before the error is reported.
"""

from __future__ import annotations

import numpy as np

from ..errors import CulpritLensError, ModelError

__all__ = ["COST_ORDER", "MethodFailed", "saliency_maps", "usable_methods"]

#: Order in which the maps are computed: cheapest first (common practice, no source).
COST_ORDER = ("gradient", "gradient_x_input", "gradcam", "smoothgrad", "integrated_gradients",
              "occlusion")


class MethodFailed(ModelError):
    """A saliency method failed; ``finished_maps`` holds the maps computed before it."""

    def __init__(self, message, finished_maps):
        super().__init__(message)
        self.finished_maps = dict(finished_maps)


def _gradcam_options(model, x, gradcam_layer, notes):
    """Grad-CAM's checked layer and geometry as options; a note says where they come from."""
    from ..attribution.gradcam import resolve_geometry

    geometry = resolve_geometry(model, x, layer=gradcam_layer)
    if geometry.source == "resize convention":
        notes.append(f"gradcam: the cells of layer {geometry.name!r} could not be placed from the "
                     "model's layers; they are assumed evenly spread over the cross-sections "
                     "(stride = input size / layer size, as a plain resize)")
    options = {"layer": geometry.name}
    if geometry.stride is not None:
        options["layer_stride"] = [float(v) for v in geometry.stride]
    if geometry.offset is not None:
        options["layer_offset"] = [float(v) for v in geometry.offset]
    return options, geometry.source


def usable_methods(model, x, methods, *, named, gradcam_layer=None, notes):
    """The methods that apply, with any options found by their checks.

    Returns
    -------
    (tuple of str, dict of str to dict, dict of str to str)
        The methods to run (in the given order), options per method, and the reason each
        skipped method was skipped.
    """
    from ..attribution.gradcam import LayerNotUsable

    found, skipped = {}, {}
    if gradcam_layer is not None and "gradcam" not in methods:
        raise ModelError("--gradcam-layer: given, but gradcam is not among the methods; add it "
                         "to --methods or leave the layer out")
    for method in methods:
        if method != "gradcam":
            continue
        try:
            options, source = _gradcam_options(model, x, gradcam_layer, notes)
        except LayerNotUsable as exc:
            if named or gradcam_layer is not None:
                raise
            skipped[method] = str(exc)
            notes.append(f"gradcam: skipped (a default method that does not apply): {exc}")
            continue
        found[method] = {**options, "geometry_from": source}
    return tuple(m for m in methods if m not in skipped), found, skipped


#: Which pass batch (explain.attribution.budget.PassBatches) each batched method uses.
_BATCH_OF = {"integrated_gradients": "integrated_gradients", "smoothgrad": "integrated_gradients",
             "occlusion": "occlusion"}


def _one_map(model, x, method, resolved, options, *, baseline_hu, notes, warnings, batch=None):
    from ..attribution import attribute
    from ..attribution.integrated import completeness_finding

    run = {k: v for k, v in options.items() if k != "geometry_from"}
    if method == "integrated_gradients":
        result, delta = attribute(model, x, method=method, target=resolved,
                                  baseline_hu=baseline_hu, return_convergence_delta=True,
                                  internal_batch_size=batch, **run)
        text, warn = completeness_finding(float(result.sum()), float(delta[0]))
        (warnings if warn else notes).append(text)
    else:
        result = attribute(model, x, method=method, target=resolved, baseline_hu=baseline_hu,
                           internal_batch_size=batch, **run)
    return result.detach().cpu().numpy()[0].astype(np.float32)


def saliency_maps(model, x, methods, resolved, options, *, baseline_hu, seed, progress, notes,
                  warnings=None, batches=None):
    """One map per method, (S, N, H, W) float32, in the order of ``methods``.

    An Integrated Gradients completeness gap above
    :data:`explain.attribution.integrated.COMPLETENESS_SHARE` goes to ``warnings`` (to
    ``notes`` when no list is given), a smaller one to ``notes``.

    Raises
    ------
    MethodFailed
        One method failed; the maps finished before it are on the error.
    """
    import torch

    maps = {}
    order = sorted(methods, key=lambda m: COST_ORDER.index(m) if m in COST_ORDER else 99)
    for n, method in enumerate(order, 1):
        if progress is not None:
            progress(f"saliency {n}/{len(order)}: {method}")
        torch.manual_seed(seed)
        try:
            maps[method] = _one_map(model, x, method, resolved, options[method],
                                    baseline_hu=baseline_hu, notes=notes,
                                    warnings=notes if warnings is None else warnings,
                                    batch=None if batches is None or method not in _BATCH_OF
                                    else getattr(batches, _BATCH_OF[method]))
        except (CulpritLensError, RuntimeError, ValueError, TypeError, IndexError) as exc:
            done = ", ".join(maps) or "none"
            cause = str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
            raise MethodFailed(f"saliency method {method} failed: {cause} (maps finished before "
                               f"it: {done})", maps) from None
    return {m: maps[m] for m in methods}
