"""Rotation averaging: recompute a map with the cross-sections turned about the tangent.

A map computed at rotation ``r`` lives in pixels whose in-plane axes are
``u = cos(r) normal + sin(r) binormal`` and ``v = -sin(r) normal + cos(r) binormal``
(docs/architecture.md). A pixel of the unrotated frame at offsets ``(dc, dr)`` from the centre
(along normal and binormal) lies in the rotated frame at column offset ``dc cos r + dr sin r``
and row offset ``-dc sin r + dr cos r``; the rotated map is read there by bilinear interpolation.
Corners that fall outside a rotated square are left out of the mean for that rotation.
Agreement between rotations is the Spearman rank correlation (``scipy.stats.spearmanr``) of the
maps brought back to the original frame, over the pixels both cover.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import torch
from scipy import ndimage
from scipy.stats import spearmanr

from ..errors import InputError

__all__ = ["RotationAverage", "rotate_back", "rotation_average", "case_resampler"]


@dataclass(frozen=True, repr=False)
class RotationAverage:
    """Mean map over rotations and how well the rotations agree.

    Attributes
    ----------
    mean : torch.Tensor like the map, float32
        Average of the maps brought back to the unrotated frame.
    angles_deg : tuple of float
    spearman : (k, k) float64
        Spearman rank correlation between rotations (diagonal 1).
    agreement : float
        Mean of the off-diagonal Spearman correlations (1.0 when k = 1).
    """

    mean: torch.Tensor
    angles_deg: tuple
    spearman: np.ndarray
    agreement: float

    def __repr__(self):
        return (
            f"RotationAverage(shape={tuple(self.mean.shape)}, angles_deg={self.angles_deg}, "
            f"agreement={self.agreement:.3f} (mean Spearman))"
        )


def rotate_back(maps, rotation_deg):
    """Bring maps ``(..., H, W)`` computed at ``rotation_deg`` back to the unrotated frame.

    Returns
    -------
    (values, valid) : float64 array like ``maps``, bool array ``(H, W)``
        Values at the unrotated pixels, and which of them lie inside the rotated square.

    Examples
    --------
    >>> m = np.arange(9.0).reshape(3, 3)
    >>> back, valid = rotate_back(m, 90.0)   # u = binormal, v = -normal at 90 degrees
    >>> back   # unrotated [0, 0] (at -normal - binormal) is rotated [2, 0]
    array([[6., 3., 0.],
           [7., 4., 1.],
           [8., 5., 2.]])
    """
    maps = np.asarray(maps, dtype=np.float64)
    h, w = maps.shape[-2:]
    r = np.deg2rad(float(rotation_deg))
    dr, dc = np.meshgrid(np.arange(h) - (h - 1) / 2, np.arange(w) - (w - 1) / 2, indexing="ij")
    col = (w - 1) / 2 + dc * np.cos(r) + dr * np.sin(r)
    row = (h - 1) / 2 - dc * np.sin(r) + dr * np.cos(r)
    eps = 1e-9
    valid = (row >= -eps) & (row <= h - 1 + eps) & (col >= -eps) & (col <= w - 1 + eps)
    coords = np.stack([np.clip(row, 0, h - 1), np.clip(col, 0, w - 1)])
    flat = maps.reshape(-1, h, w)
    out = np.stack([ndimage.map_coordinates(m, coords, order=1, mode="nearest") for m in flat])
    return out.reshape(maps.shape), valid


def rotation_average(compute, resample, *, rotations, x0=None):
    """Average a map over ``rotations`` evenly spaced turns of the cross-sections.

    Parameters
    ----------
    compute : callable
        ``x (1, S, N, H, W) -> map`` of the same shape, e.g. ``lambda x: attribute(w, x, ...)``.
    resample : callable
        ``rotation_deg -> x`` at that rotation, e.g. from :func:`case_resampler`.
    rotations : int
        k; angles ``360 j / k`` degrees for j = 0 .. k-1.
    x0 : tensor, optional
        The unrotated input, if already at hand (saves one resampling).

    Returns
    -------
    RotationAverage
    """
    if isinstance(rotations, bool) or not isinstance(rotations, int) or rotations < 1:
        raise InputError(f"rotations: expected a positive integer, got {rotations!r}")
    if not callable(resample):
        raise InputError(
            "rotations: give resample=callable(rotation_deg) -> x, e.g. "
            "explain.attribution.case_resampler(case, spec)"
        )
    angles = tuple(360.0 * j / rotations for j in range(rotations))
    backs, valids = [], []
    for angle in angles:
        x = x0 if (angle == 0.0 and x0 is not None) else resample(angle)
        m = compute(x)
        m = m[0] if isinstance(m, tuple) else m
        back, valid = rotate_back(m.detach().double().numpy(), angle)
        backs.append(back)
        valids.append(np.broadcast_to(valid, back.shape))
    backs, valids = np.stack(backs), np.stack(valids)
    count = valids.sum(axis=0)
    mean = np.where(valids, backs, 0.0).sum(axis=0) / np.maximum(count, 1)
    k = len(angles)
    rho = np.eye(k)
    for a in range(k):
        for b in range(a + 1, k):
            both = valids[a] & valids[b]
            ra, rb = backs[a][both], backs[b][both]
            if ra.size < 3 or np.ptp(ra) == 0 or np.ptp(rb) == 0:
                value = np.nan
            else:
                value = float(spearmanr(ra, rb).statistic)
            rho[a, b] = rho[b, a] = value
    off = rho[~np.eye(k, dtype=bool)]
    if k == 1:
        agreement = 1.0
    elif np.all(np.isnan(off)):
        agreement = float("nan")
    else:
        agreement = float(np.nanmean(off))
    return RotationAverage(
        mean=torch.from_numpy(mean.astype(np.float32)), angles_deg=angles, spearman=rho,
        agreement=agreement,
    )


def case_resampler(case, spec, *, fill_value=-1000.0):
    """``rotation_deg -> x (1, S, N, H, W)``: the case sampled with ``spec`` at that rotation."""
    from ..geometry import sample_case

    def resample(rotation_deg):
        return sample_case(
            case, points=spec.points, size=spec.size, pixel_mm=spec.pixel_mm,
            rotation_deg=rotation_deg, fill_value=fill_value,
        ).tensor()

    return resample
