"""Occlusion (Zeiler and Fergus 2014) through captum ``Occlusion``, one segment at a time.

A window of ``(cross-sections, pixels, pixels)`` filled with ``baseline_hu`` slides over each
segment with ``stride``; each pixel gets the mean drop of the target over the windows that cover
it. Run on the segment-local function, every perturbation encodes one segment instead of S, and
the maps equal captum ``Occlusion`` on the whole model with a window of one segment.

Every segment gets the same number of cross-sections whatever its length, so a window counted in
cross-sections would cover a different length of vessel on each segment. The window along the
arc is therefore given in mm (``window_mm``, default :data:`WINDOW_MM`) and converted per segment
by :func:`arc_windows` from that segment's spacing of cross-sections.
"""

from __future__ import annotations

import math

import numpy as np
import torch
from captum.attr import Occlusion

from ..errors import InputError
from .local import SegmentLocal

__all__ = ["WINDOW_MM", "WINDOW_PIXELS", "arc_windows", "occlusion"]

#: Default occlusion window along the arc, mm. Our own setting (common practice, no source): about
#: the length of a focal coronary lesion, so that one window can hide one narrowing.
WINDOW_MM = 4.0

#: Default in-plane window, pixels per side.
WINDOW_PIXELS = 8


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


def arc_windows(window_mm, arc_step_mm, n_sections, *, pixels=WINDOW_PIXELS):
    """Per-segment occlusion windows and strides for a window of ``window_mm`` along the arc.

    Parameters
    ----------
    window_mm : float
        Window length along the arc, mm.
    arc_step_mm : (S,) array_like of float
        Spacing of consecutive cross-sections of each segment, mm.
    n_sections : int
        Cross-sections per segment N (the window is clipped to it).
    pixels : int or (2,) int
        In-plane window, pixels (rows, columns).

    Returns
    -------
    windows, strides : list of S tuples (cross-sections, rows, columns)
        The window spans ``round(window_mm / step)`` cross-sections (at least 1, at most N);
        the stride along the arc is half the window (at least 1) and a whole window in-plane.

    Examples
    --------
    >>> windows, strides = arc_windows(4.0, [0.5, 2.0], 32)
    >>> windows, strides
    ([(8, 8, 8), (2, 8, 8)], [(4, 8, 8), (1, 8, 8)])
    """
    if isinstance(window_mm, bool) or not isinstance(window_mm, (int, float)) \
            or not math.isfinite(window_mm) or window_mm <= 0:
        raise InputError(f"occlusion window_mm: expected a length > 0 in mm, got {window_mm!r}")
    steps = np.asarray(arc_step_mm, dtype=np.float64).reshape(-1)
    if not (np.isfinite(steps).all() and (steps > 0).all()):
        raise InputError(f"occlusion arc_step_mm: expected spacings > 0 in mm, got {steps.tolist()}")
    rows, cols = (pixels, pixels) if isinstance(pixels, int) else tuple(int(p) for p in pixels)
    windows, strides = [], []
    for step in steps:
        along = int(min(max(1, round(float(window_mm) / float(step))), int(n_sections)))
        windows.append((along, rows, cols))
        strides.append((max(1, along // 2), rows, cols))
    return windows, strides


def _per_segment(value, name, n_segments):
    """One window (or stride) per segment from a 3-tuple or a sequence of S 3-tuples."""
    if isinstance(value, (list, tuple)) and value and isinstance(value[0], (list, tuple)):
        if len(value) != n_segments:
            raise InputError(f"occlusion {name}: {len(value)} windows for {n_segments} segments; "
                             "give one per segment or a single (cross-sections, pixels, pixels)")
        return [_shape3(v, name) for v in value]
    return [_shape3(value, name)] * n_segments


def _resolve(x, window, stride, window_mm, arc_step_mm):
    s, n = x.shape[1], x.shape[2]
    if window_mm is not None:
        if arc_step_mm is None:
            raise InputError("occlusion window_mm: needs arc_step_mm, the spacing of each "
                             "segment's cross-sections in mm")
        pixels = _per_segment(window, "window", s)[0][1:]
        windows, strides = arc_windows(window_mm, arc_step_mm, n, pixels=pixels)
        if len(windows) != s:
            raise InputError(f"occlusion arc_step_mm: {len(windows)} spacings for {s} segments")
        return windows, strides
    windows = _per_segment(window, "window", s)
    strides = windows if stride is None else _per_segment(stride, "stride", s)
    return windows, strides


def occlusion(
    wrapped, x, target, *, window=(4, WINDOW_PIXELS, WINDOW_PIXELS), stride=None, window_mm=None,
    arc_step_mm=None, baseline_hu=0.0, internal_batch_size=None,
):
    """Occlusion maps ``(1, S, N, H, W)``; ``internal_batch_size`` windows per encoder call.

    Parameters
    ----------
    window, stride : (3,) int or sequence of S (3,) int
        Window and stride (cross-sections, pixels, pixels), one for all segments or one per
        segment; the stride defaults to the window.
    window_mm : float, optional
        Window along the arc in mm; with it, ``arc_step_mm`` (S,) converts it per segment
        (:func:`arc_windows`), ``window`` gives only the in-plane size and ``stride`` is ignored.
    """
    windows, strides = _resolve(x, window, stride, window_mm, arc_step_mm)
    for wv in windows:
        if any(a > b for a, b in zip(wv, x.shape[2:])):
            raise InputError(f"occlusion window {wv}: larger than the stack {tuple(x.shape[2:])}")
    with torch.no_grad():
        feats = wrapped.encode(x)[0]
        maps = []
        for s in range(x.shape[1]):
            f_s = SegmentLocal(wrapped, x, target, s, feats=feats)
            maps.append(Occlusion(f_s).attribute(
                x[:, s].clone(), sliding_window_shapes=windows[s], strides=strides[s],
                baselines=float(baseline_hu), perturbations_per_eval=internal_batch_size or 16,
            ))
    return torch.stack(maps, dim=1)
