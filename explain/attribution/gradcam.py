"""Grad-CAM (Selvaraju et al. 2017) on a named encoder layer, through captum ``LayerGradCam``.

Channel weights are the mean over the layer's grid of d target / d activation, the map is
``ReLU(sum_k w_k A_k)`` (captum ``relu_attributions=True``), computed per segment on the
segment-local function. The coarse map is then put on the N x H x W grid by linear interpolation
at the true centre of every layer cell: cell ``j`` along an axis sits at input pixel
``offset + stride * j``. Without ``layer_stride``/``layer_offset`` (or the module's own
``cam_stride``/``cam_offset`` for its ``cam_layer``), the centres follow the convention of a plain
resize (``torch.nn.functional.interpolate`` with ``align_corners=False``): stride = input size /
layer size, offset = (stride - 1) / 2. Outside the outermost centres the edge value is kept.

The stride and offset are worked the stride and offset out from the model itself where it can: it
watches one encoder pass of one segment and composes the convolutions and poolings run before
and at the layer. A layer with kernel ``k``, stride ``s``, padding ``p`` and dilation ``d``
maps its output cell ``j`` to the input position ``j * s + (d (k - 1) / 2 - p)``, the centre of
its receptive field (Dumoulin & Visin 2016, "A guide to convolution arithmetic for deep
learning"); chained, strides multiply and offsets add up in input pixels. When some step
changes the grid in a way it cannot follow (a functional pooling, a resize), or the sizes do
not add up, the resize convention above is used and a note says so.

:func:`check_layer` is the cheap check run before any map: the layer exists, the encoder reaches
it, and its output keeps the cross-section layout. :class:`LayerNotUsable` says why not.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import torch
from captum.attr import LayerGradCam

from ..errors import InputError, ModelError
from .local import SegmentLocal

__all__ = ["LayerGeometry", "LayerNotUsable", "check_layer", "gradcam", "resolve_geometry",
           "upsample_at_centres"]


class LayerNotUsable(InputError):
    """Grad-CAM does not apply to this model or layer (no convolution, wrong layout...)."""


@dataclass(frozen=True)
class LayerGeometry:
    """A Grad-CAM layer and where its cells sit on the segment's (N, H, W) or (H, W) grid.

    Attributes
    ----------
    name : str
        Dotted name of the layer.
    shape : tuple of int
        The layer's output for one segment, e.g. ``(1, K, n, h, w)`` or ``(N, K, h, w)``.
    stride, offset : tuple of float or None
        Input pixels between cells, and the input pixel of cell 0's centre, per axis; None when
        they could not be worked out (the resize convention is then used).
    source : str
        Where stride and offset come from: "given", "module", "layers" or "resize convention".
    """

    name: str
    shape: tuple
    stride: tuple | None
    offset: tuple | None
    source: str


def _axis_weights(n_in, n_out, stride, offset):
    """(n_out, n_in) linear interpolation weights from cell centres ``offset + stride * j``."""
    q = (np.arange(n_out) - offset) / stride
    q = np.clip(q, 0.0, n_in - 1)
    lo = np.floor(q).astype(int)
    hi = np.minimum(lo + 1, n_in - 1)
    frac = q - lo
    m = np.zeros((n_out, n_in))
    m[np.arange(n_out), lo] += 1.0 - frac
    m[np.arange(n_out), hi] += frac
    return torch.as_tensor(m)


def _triple(value, name, dims):
    if value is None:
        return None
    vals = (value,) * dims if isinstance(value, (int, float)) else tuple(value)
    if len(vals) != dims or not all(isinstance(v, (int, float)) and not isinstance(v, bool) for v in vals):
        raise InputError(f"gradcam {name}: expected a number or {dims} numbers, got {value!r}")
    return tuple(float(v) for v in vals)


def upsample_at_centres(coarse, shape, *, stride=None, offset=None):
    """Interpolate ``coarse`` (n1, n2, ...) onto ``shape`` with cell centres at offset + stride*j.

    Examples
    --------
    >>> upsample_at_centres(torch.tensor([0.0, 1.0]), (4,), stride=2, offset=0.5)
    tensor([0.0000, 0.2500, 0.7500, 1.0000], dtype=torch.float64)
    """
    dims = coarse.ndim
    stride = _triple(stride, "layer_stride", dims)
    offset = _triple(offset, "layer_offset", dims)
    out = coarse.double()
    for axis in range(dims):
        n_in, n_out = coarse.shape[axis], shape[axis]
        st = stride[axis] if stride else n_out / n_in
        off = offset[axis] if offset else (st - 1.0) / 2.0
        if not st > 0:
            raise InputError(f"gradcam layer_stride: expected positive values, got {stride}")
        m = _axis_weights(n_in, n_out, st, off)
        out = torch.tensordot(m, out.movedim(axis, 0), dims=([1], [0])).movedim(0, axis)
    return out


def _layer(wrapped, layer):
    module = wrapped.module
    if layer is None:
        layer = getattr(module, "cam_layer", None)
    if layer is None:
        # common practice (no source): the last convolution of the encoder
        convs = (torch.nn.Conv2d, torch.nn.Conv3d)
        names = [n for n, m in module.named_modules() if isinstance(m, convs)]
        if not names:
            raise LayerNotUsable(
                f"gradcam: {wrapped.name!r} has no Conv2d/Conv3d layer and no cam_layer; name "
                "an encoder layer with --gradcam-layer (layer=...)"
            )
        layer = names[-1]
    try:
        return layer, module.get_submodule(layer)
    except AttributeError:
        raise InputError(f"gradcam layer {layer!r}: no such submodule in {wrapped.name!r}") from None


_GRID = (torch.nn.Conv2d, torch.nn.Conv3d, torch.nn.MaxPool2d, torch.nn.MaxPool3d,
         torch.nn.AvgPool2d, torch.nn.AvgPool3d)


def _watch(wrapped, x, target_layer):
    """Leaf modules run during one encoder pass of segment 0, in order, up to ``target_layer``:
    (module, input shape, output shape); and the layer's output shape (None if not reached)."""
    calls, hooks = [], []

    def hook(mod, inputs, output):
        if inputs and isinstance(inputs[0], torch.Tensor) and isinstance(output, torch.Tensor):
            calls.append((mod, tuple(inputs[0].shape), tuple(output.shape)))

    wrapped.prepare(x)  # find the split first, so that no hook sees a whole forward pass
    for m in wrapped.module.modules():
        if m is target_layer or not any(True for _ in m.children()):
            hooks.append(m.register_forward_hook(hook))
    try:
        with torch.no_grad():
            wrapped.encode(x[:, :1].detach())
    finally:
        for h in hooks:
            h.remove()
    for i, (mod, _, out) in enumerate(calls):
        if mod is target_layer:
            return calls[: i + 1], out
    return calls, None


def _per_axis(value, dims):
    return (value,) * dims if isinstance(value, int) else tuple(value)


def _compose(calls, grid_in, dims):
    """Stride and offset of the last call's cells in input pixels, or None if not derivable."""
    stride, offset, size = [1.0] * dims, [0.0] * dims, list(grid_in)
    started = False
    for mod, shape_in, shape_out in calls:
        if len(shape_in) != dims + 2 or len(shape_out) != dims + 2:
            continue
        if not started:
            if tuple(shape_in[2:]) != tuple(grid_in):
                continue
            started = True
        if tuple(shape_in[2:]) != tuple(size):
            return None
        if isinstance(mod, _GRID):
            k, s = _per_axis(mod.kernel_size, dims), _per_axis(mod.stride or mod.kernel_size, dims)
            p = mod.padding
            d = _per_axis(getattr(mod, "dilation", 1), dims)
            if isinstance(p, str):
                p = [0 if p == "valid" else d[a] * (k[a] - 1) / 2 for a in range(dims)]
            p = _per_axis(p, dims)
            for a in range(dims):
                offset[a] += stride[a] * (d[a] * (k[a] - 1) / 2 - p[a])
                stride[a] *= s[a]
                size[a] = (size[a] + 2 * p[a] - d[a] * (k[a] - 1) - 1) // s[a] + 1
        if [int(v) for v in size] != list(shape_out[2:]):
            return None
    return (tuple(stride), tuple(offset)) if started else None


def check_layer(wrapped, x, layer=None):
    """The Grad-CAM layer of ``wrapped`` for ``x (1, S, N, H, W)``, checked and located.

    Returns
    -------
    LayerGeometry

    Raises
    ------
    LayerNotUsable
        No convolution to use, the encoder does not reach the layer, or its output does not
        keep the cross-section layout (e.g. a 2-D CNN taking the N cross-sections as channels).
    """
    name, module_layer = _layer(wrapped, layer)
    n, h, w = x.shape[2:]
    calls, shape = _watch(wrapped, x, module_layer)
    if shape is None:
        raise LayerNotUsable(f"gradcam layer {name!r}: not reached when encoding a segment (is it "
                             "in the head?); name an encoder layer with --gradcam-layer")
    if len(shape) == 5 and shape[0] == 1:
        dims, grid = 3, (n, h, w)
    elif len(shape) == 4 and shape[0] == n:
        dims, grid = 2, (h, w)
    else:
        raise LayerNotUsable(
            f"gradcam layer {name!r}: output per segment has shape {shape}, which does not keep "
            f"the cross-section layout: expected (1, K, n, h, w) for a 3-D layer over the stack "
            f"or ({n}, K, h, w) for a 2-D layer applied to each cross-section")
    found = _compose(calls, grid, dims)
    if found is None:
        return LayerGeometry(name, shape, None, None, "resize convention")
    return LayerGeometry(name, shape, found[0], found[1], "layers")


def resolve_geometry(wrapped, x, *, layer=None, layer_stride=None, layer_offset=None):
    """The layer checked by :func:`check_layer`, with its stride and offset: as given, else the
    module's ``cam_stride``/``cam_offset`` for its own ``cam_layer``, else from the layers."""
    geometry = check_layer(wrapped, x, layer)
    if layer_stride is not None or layer_offset is not None:
        return LayerGeometry(geometry.name, geometry.shape, layer_stride, layer_offset, "given")
    module = wrapped.module
    if geometry.name == getattr(module, "cam_layer", None) and (
            getattr(module, "cam_stride", None) is not None
            or getattr(module, "cam_offset", None) is not None):
        return LayerGeometry(geometry.name, geometry.shape, getattr(module, "cam_stride", None),
                             getattr(module, "cam_offset", None), "module")
    return geometry


def gradcam(wrapped, x, target, *, layer=None, layer_stride=None, layer_offset=None, relu=True):
    """Grad-CAM maps ``(1, S, N, H, W)`` for one patient.

    Parameters
    ----------
    layer : str, optional
        Dotted name of an encoder layer (``module.get_submodule``); default ``module.cam_layer``,
        else the module's last Conv2d/Conv3d.
    layer_stride, layer_offset : float or tuple of float, optional
        Input pixels between layer cells, and the input pixel of cell 0's centre, per axis
        (3 axes for a 3D layer over N x H x W, 2 for a 2D layer applied per cross-section).
        Default: the module's ``cam_stride``/``cam_offset`` for its ``cam_layer``, else worked
        out from the layers (:func:`resolve_geometry`), else the resize convention.
    relu : bool
        Apply the ReLU of the published method.
    """
    geometry = resolve_geometry(wrapped, x, layer=layer, layer_stride=layer_stride,
                                layer_offset=layer_offset)
    name, module_layer = _layer(wrapped, geometry.name)
    layer_stride, layer_offset = geometry.stride, geometry.offset
    n, h, w = x.shape[2:]
    with torch.no_grad():
        feats = wrapped.encode(x)[0]
    maps = []
    for s in range(x.shape[1]):
        f_s = SegmentLocal(wrapped, x, target, s, feats=feats)
        cam = LayerGradCam(f_s, module_layer).attribute(x[:, s].clone(), relu_attributions=bool(relu))
        cam = cam.detach()
        if cam.ndim == 5 and cam.shape[:2] == (1, 1):
            up = upsample_at_centres(cam[0, 0], (n, h, w), stride=layer_stride, offset=layer_offset)
        elif cam.ndim == 4 and cam.shape[:2] == (n, 1):
            up = torch.stack([
                upsample_at_centres(c[0], (h, w), stride=layer_stride, offset=layer_offset) for c in cam
            ])
        else:
            raise ModelError(
                f"gradcam layer {name!r}: output per segment has shape {tuple(cam.shape)}; expected "
                f"(1, K, n, h, w) for a 3D layer over the stack or ({n}, K, h, w) for a 2D layer "
                "applied to each cross-section"
            )
        maps.append(up.float())
    return torch.stack(maps)[None]
