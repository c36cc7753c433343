"""Gradient family: plain gradient, gradient times input, SmoothGrad (through captum).

- ``gradient``: d target / d x (captum ``Saliency`` with ``abs=False`` by default).
- ``gradient_x_input``: gradient times input (captum ``InputXGradient``), in HU x gradient.
- ``smoothgrad`` (Smilkov et al. 2017): the gradient averaged over ``n`` noisy copies of the
  input (captum ``NoiseTunnel`` around ``Saliency``); noise sd is ``noise`` times the HU range
  ``range_hu`` (max - min), drawn with ``torch.manual_seed(seed)`` inside a forked RNG.
  :func:`inside_range_hu` gives that range from the pixels that lie inside the CT, so that the
  -1000 HU fill of pixels beyond the image's edge does not widen it (Smilkov et al. take the
  range of the input itself); without ``range_hu`` the range of ``x`` is used. The noise is added to the
  whole patient (every segment at once), since the segment-local function would keep the other
  segments noise-free and answer a different question.

The first two run per segment on the segment-local function, which has the whole model's
gradient (up to exact ties in the max).
"""

from __future__ import annotations

import numpy as np
import torch
from captum.attr import InputXGradient, NoiseTunnel, Saliency

from ..errors import InputError
from .local import SegmentLocal, whole_model

__all__ = ["gradient", "gradient_x_input", "smoothgrad", "inside_range_hu"]


def inside_range_hu(sections, image):
    """``(min, max)`` HU of the cross-section pixels that lie inside the CT.

    Parameters
    ----------
    sections : sequence of CrossSections
        Their ``values (N, H, W)`` HU and ``points_mm (N, H, W, 3)`` mm.
    image : SimpleITK.Image
        The CT they were sampled from (a pixel is inside when its continuous index lies within
        the voxel grid, as sampling decides).

    Returns
    -------
    (float, float)
        HU; the range of all pixels when none lies inside.
    """
    from ..geometry._grid import INDEX_TOLERANCE, Grid

    grid = Grid(image, with_values=False)
    lo, hi, all_lo, all_hi = np.inf, -np.inf, np.inf, -np.inf
    for cs in sections:
        values = np.asarray(cs.values, dtype=np.float64)
        index = grid.index_of(cs.points_mm)
        inside = ((index >= -INDEX_TOLERANCE) & (index <= grid.size - 1 + INDEX_TOLERANCE)).all(-1)
        all_lo, all_hi = min(all_lo, values.min()), max(all_hi, values.max())
        if inside.any():
            lo, hi = min(lo, values[inside].min()), max(hi, values[inside].max())
    return (float(lo), float(hi)) if lo <= hi else (float(all_lo), float(all_hi))


def _per_segment(method_cls, wrapped, x, target, **kwargs):
    with torch.no_grad():
        feats = wrapped.encode(x)[0]
    maps = []
    for s in range(x.shape[1]):
        f_s = SegmentLocal(wrapped, x, target, s, feats=feats)
        inp = x[:, s].clone().requires_grad_(True)
        maps.append(method_cls(f_s).attribute(inp, **kwargs).detach())
    return torch.stack(maps, dim=1)


def gradient(wrapped, x, target, *, abs=False):  # noqa: A002 - captum's name for the option
    """Gradient of the target with respect to every HU value; ``abs=True`` gives its magnitude."""
    return _per_segment(Saliency, wrapped, x, target, abs=bool(abs))


def gradient_x_input(wrapped, x, target):
    """Gradient times input (HU)."""
    return _per_segment(InputXGradient, wrapped, x, target)


def smoothgrad(  # noqa: A002 - captum's name for the abs option
    wrapped, x, target, *, n=50, noise=0.15, seed=0, range_hu=None, internal_batch_size=None,
    abs=False,
):
    """SmoothGrad: the mean gradient over ``n`` noisy copies, noise sd ``noise`` x HU range.

    ``range_hu`` ``(min, max)`` HU sets the range (:func:`inside_range_hu`); default that of ``x``.
    """
    if isinstance(n, bool) or not isinstance(n, int) or n < 1:
        raise InputError(f"smoothgrad n: expected a positive number of samples, got {n!r}")
    if isinstance(noise, bool) or not isinstance(noise, (int, float)) or not noise >= 0:
        raise InputError(f"smoothgrad noise: expected a fraction of the HU range >= 0, got {noise!r}")
    if range_hu is None:
        span = float(x.max() - x.min())
    else:
        try:
            low, high = (float(v) for v in range_hu)
        except (TypeError, ValueError):
            raise InputError(f"smoothgrad range_hu: expected (min, max) in HU, got {range_hu!r}") from None
        if not (np.isfinite([low, high]).all() and high >= low):
            raise InputError(f"smoothgrad range_hu: expected finite min <= max in HU, got {range_hu!r}")
        span = high - low
    sd = float(noise) * span
    tunnel = NoiseTunnel(Saliency(whole_model(wrapped, target)))
    with torch.random.fork_rng(devices=[]):
        torch.manual_seed(seed)
        out = tunnel.attribute(
            x.clone(), nt_type="smoothgrad", nt_samples=n, stdevs=sd,
            nt_samples_batch_size=internal_batch_size or 8, abs=bool(abs),
        )
    return out.detach()
