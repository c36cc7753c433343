"""Grad-CAM (Selvaraju et al. 2017) on a named encoder layer, through captum ``LayerGradCam``.

Channel weights are the mean over the layer's grid of d target / d activation, the map is
``ReLU(sum_k w_k A_k)`` (captum ``relu_attributions=True``), computed per segment on the
segment-local function. The coarse map is then put on the N x H x W grid by linear interpolation
at the true centre of every layer cell: cell ``j`` along an axis sits at input pixel
``offset + stride * j``. Without ``layer_stride``/``layer_offset`` (or the module's own
``cam_stride``/``cam_offset`` for its ``cam_layer``), the centres follow the convention of a plain
resize (``torch.nn.functional.interpolate`` with ``align_corners=False``): stride = input size /
layer size, offset = (stride - 1) / 2. Outside the outermost centres the edge value is kept.
"""

from __future__ import annotations

import numpy as np
import torch
from captum.attr import LayerGradCam

from ..errors import InputError, ModelError
from .local import SegmentLocal

__all__ = ["gradcam", "upsample_at_centres"]


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
            raise InputError(
                f"gradcam: {wrapped.name!r} has no Conv2d/Conv3d layer and no cam_layer; name "
                "an encoder layer with layer=..."
            )
        layer = names[-1]
    try:
        return layer, module.get_submodule(layer)
    except AttributeError:
        raise InputError(f"gradcam layer {layer!r}: no such submodule in {wrapped.name!r}") from None


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
    relu : bool
        Apply the ReLU of the published method.
    """
    name, module_layer = _layer(wrapped, layer)
    if layer is None:
        if layer_stride is None:
            layer_stride = getattr(wrapped.module, "cam_stride", None)
        if layer_offset is None:
            layer_offset = getattr(wrapped.module, "cam_offset", None)
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
