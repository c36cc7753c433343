"""``attribute``: one entry point for every saliency method, in captum's vocabulary."""

from __future__ import annotations

import inspect

import torch

from ..errors import InputError
from ._common import check_call, fixed_target
from .gradcam import gradcam
from .gradients import gradient, gradient_x_input, smoothgrad
from .integrated import integrated_gradients
from .occlusion import occlusion
from .rotation import rotation_average

__all__ = ["METHODS", "attribute"]

#: Method names (ours) -> implementation; the published names are in each module's docstring.
_IMPL = {
    "gradient": gradient,
    "gradient_x_input": gradient_x_input,
    "smoothgrad": smoothgrad,
    "integrated_gradients": integrated_gradients,
    "gradcam": gradcam,
    "occlusion": occlusion,
}
METHODS = tuple(_IMPL)


def _options(method, fn, options):
    skip = ("wrapped", "x", "target", "baseline_hu", "internal_batch_size")
    allowed = [p for p in inspect.signature(fn).parameters if p not in skip]
    unknown = sorted(set(options) - set(allowed))
    if unknown:
        raise InputError(
            f"attribute(method={method!r}): unknown option(s) {', '.join(unknown)}; "
            f"this method takes {', '.join(allowed) or 'none'}"
        )


def attribute(
    wrapped, x, *, method, target, baseline_hu=0.0, internal_batch_size=None,
    rotations=None, resample=None, **options,
):
    """Saliency map of ``target`` over every HU value of ``x``.

    Parameters
    ----------
    wrapped : WrappedModel
    x : (B, S, N, H, W) float tensor, HU
    method : str
        One of :data:`METHODS`: ``gradient``, ``gradient_x_input``, ``smoothgrad`` (options
        ``n``, ``noise``, ``seed``), ``integrated_gradients`` (``steps``,
        ``return_convergence_delta``), ``gradcam`` (``layer``, ``layer_stride``,
        ``layer_offset``), ``occlusion`` (``window``, ``stride``, ``window_mm``,
        ``arc_step_mm``: the window along the arc in mm, converted per segment).
    target : int or str
        Column, ``"predicted"`` (fixed per patient), ``"expected"`` or ``"key:column"``.
    baseline_hu : float
        The "absent" value: Integrated Gradients baseline and occlusion fill.
    internal_batch_size : int, optional
        Inputs per model call for the batched methods (SmoothGrad samples, IG steps, occlusion
        windows); bounds memory.
    rotations : int, optional
        Average over this many evenly spaced rotations of the cross-sections about the tangent;
        needs ``resample(rotation_deg) -> x`` (see :mod:`explain.attribution.rotation`, which
        also reports the Spearman agreement between rotations).

    Returns
    -------
    torch.Tensor
        float32, shaped like ``x``; with ``return_convergence_delta=True`` (Integrated
        Gradients) a pair ``(map, delta (B,))``.
    """
    if method not in _IMPL:
        raise InputError(f"attribute method {method!r}: expected one of {', '.join(METHODS)}")
    fn = _IMPL[method]
    _options(method, fn, options)
    check_call(wrapped, x, one_patient=False)
    if rotations is not None:
        if x.shape[0] != 1:
            raise InputError("rotations: average one patient at a time (B = 1)")

        def compute(xr):
            return attribute(
                wrapped, xr, method=method, target=target, baseline_hu=baseline_hu,
                internal_batch_size=internal_batch_size, **options,
            )

        return rotation_average(compute, resample, rotations=rotations, x0=x).mean
    params = inspect.signature(fn).parameters
    extra = dict(options)
    if "baseline_hu" in params:
        extra["baseline_hu"] = baseline_hu
    if "internal_batch_size" in params:
        extra["internal_batch_size"] = internal_batch_size
    maps, deltas = [], []
    for b in range(x.shape[0]):
        xb = x[b : b + 1].detach().float()
        tgt = fixed_target(wrapped, xb, target)
        out = fn(wrapped, xb, tgt, **extra)
        if isinstance(out, tuple):
            out, delta = out
            deltas.append(delta)
        maps.append(out.float())
    result = torch.cat(maps).to(torch.float32)
    if deltas:
        return result, torch.cat(deltas)
    return result
