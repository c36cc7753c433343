"""How alike two attribution maps are: Spearman rank correlation and SSIM.

Both come from reference libraries, used as they are: ``scipy.stats.spearmanr`` and
``skimage.metrics.structural_similarity`` (Wang, Bovik, Sheikh, Simoncelli 2004). What is ours is
the choice of inputs, fixed here for the sanity and stability checks:

- the sanity check compares ``|map|`` (Adebayo et al. 2018 compare absolute maps, since a
  randomised layer may flip a map's sign without changing what it points at);
- SSIM runs per segment on the whole cross-section stack ``(N, H, W)`` as one 3-D image, with
  ``data_range`` the original stack's range (max - min), so that a randomised map on another
  scale is not rescaled to look alike; its window is 7 (scikit-image's default), or the
  largest odd size that fits a smaller stack.

A comparison that is undefined (a constant map has no ranks; a stack of one value has no range)
is NaN, never a crash, and :func:`spearman` says why.
"""

from __future__ import annotations

import numpy as np
from scipy.stats import spearmanr
from skimage.metrics import structural_similarity

from ..errors import InputError

__all__ = ["spearman", "stack_ssim"]


def _pair(a, b, name):
    a, b = np.asarray(a, dtype=np.float64), np.asarray(b, dtype=np.float64)
    if a.shape != b.shape:
        raise InputError(f"{name}: the two maps differ in shape, {a.shape} and {b.shape}")
    return a, b


def spearman(a, b, *, valid=None):
    """Spearman rank correlation of two maps over their (valid) elements.

    Parameters
    ----------
    a, b : array, same shape
    valid : bool array broadcastable to that shape, optional
        Elements to compare (e.g. pixels a rotated grid covers); default all.

    Returns
    -------
    (float, str or None)
        The correlation (``scipy.stats.spearmanr``), or NaN with the reason: fewer than 3
        elements, or one map constant over them.

    Examples
    --------
    >>> spearman([1.0, 2.0, 3.0, 4.0], [10.0, 20.0, 30.0, 45.0])
    (1.0, None)
    >>> spearman([1.0, 1.0, 1.0], [1.0, 2.0, 3.0])
    (nan, 'the first map is constant')
    """
    a, b = _pair(a, b, "spearman")
    if valid is not None:
        keep = np.broadcast_to(np.asarray(valid, dtype=bool), a.shape)
        a, b = a[keep], b[keep]
    a, b = a.ravel(), b.ravel()
    if a.size < 3:
        return float("nan"), f"only {a.size} elements to compare"
    for name, m in (("first", a), ("second", b)):
        if not np.all(np.isfinite(m)):
            return float("nan"), f"the {name} map has NaN or infinite values"
        if np.ptp(m) == 0:
            return float("nan"), f"the {name} map is constant"
    return float(spearmanr(a, b).statistic), None


def _window(shape):
    w = min(7, min(shape))
    return w if w % 2 else w - 1


def stack_ssim(original, other):
    """SSIM of one segment's map stack against the original's, as one 3-D image.

    Parameters
    ----------
    original, other : (N, H, W) float
        E.g. ``|map|`` of one segment, before and after randomisation.

    Returns
    -------
    float
        ``skimage.metrics.structural_similarity(original, other, data_range=ptp(original))``
        with a window of 7 (smaller for a small stack); NaN when the original is constant
        (no data range) or a side is under 3 elements long.

    Examples
    --------
    >>> m = np.random.default_rng(0).random((8, 8, 8))
    >>> stack_ssim(m, m)
    1.0
    """
    original, other = _pair(original, other, "stack_ssim")
    if original.ndim != 3:
        raise InputError(f"stack_ssim: expected (N, H, W) stacks, got shape {original.shape}")
    span = float(np.ptp(original))
    win = _window(original.shape)
    if span == 0 or win < 3 or not np.all(np.isfinite(other)):
        return float("nan")
    return float(structural_similarity(original, other, data_range=span, win_size=win))
