"""Occlusion (Zeiler and Fergus 2014) through captum ``Occlusion``, one segment at a time.

A window of ``window = (cross-sections, pixels, pixels)`` filled with ``baseline_hu`` slides over
each segment with ``stride``; each pixel gets the mean drop of the target over the windows that
cover it. Run on the segment-local function, every perturbation encodes one segment instead of S,
and the maps equal captum ``Occlusion`` on the whole model with a window of one segment.
"""

from __future__ import annotations

import torch
from captum.attr import Occlusion

from ..errors import InputError
from .local import SegmentLocal

__all__ = ["occlusion"]


def _shape3(value, name):
    vals = (value,) * 3 if isinstance(value, int) and not isinstance(value, bool) else value
    try:
        vals = tuple(int(v) for v in vals)
    except (TypeError, ValueError):
        vals = ()
    if len(vals) != 3 or min(vals) < 1:
        raise InputError(
            f"occlusion {name}: expected 3 positive integers (cross-sections, pixels, pixels), "
            f"got {value!r}"
        )
    return vals


def occlusion(
    wrapped, x, target, *, window=(4, 8, 8), stride=None, baseline_hu=0.0,
    internal_batch_size=None,
):
    """Occlusion maps ``(1, S, N, H, W)``; ``internal_batch_size`` windows per encoder call."""
    window = _shape3(window, "window")
    stride = window if stride is None else _shape3(stride, "stride")
    if any(wv > sv for wv, sv in zip(window, x.shape[2:])):
        raise InputError(f"occlusion window {window}: larger than the stack {tuple(x.shape[2:])}")
    with torch.no_grad():
        feats = wrapped.encode(x)[0]
        maps = []
        for s in range(x.shape[1]):
            f_s = SegmentLocal(wrapped, x, target, s, feats=feats)
            maps.append(Occlusion(f_s).attribute(
                x[:, s].clone(), sliding_window_shapes=window, strides=stride,
                baselines=float(baseline_hu), perturbations_per_eval=internal_batch_size or 16,
            ))
    return torch.stack(maps, dim=1)
