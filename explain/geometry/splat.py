"""Put maps computed on cross-sections back into the scan's voxel grid.

Splatting is the adjoint of trilinear sampling: each pixel spreads its value to the eight
voxels around its position with the same trilinear weights sampling would use, and each voxel
is the weighted mean of what it received (overlapping sections average). Sums are
accumulated with ``np.bincount`` over a bounding box of the touched voxels.
"""

from __future__ import annotations

import numpy as np
import SimpleITK as sitk

from ..errors import InputError
from ._grid import Grid
from .sampling import CrossSections
from .stack import CaseSections

__all__ = ["splat"]


def _pair_up(maps, cross_sections):
    if isinstance(cross_sections, CaseSections):
        cross_sections = cross_sections.sections
    if isinstance(cross_sections, CrossSections):
        cross_sections = [cross_sections]
        if isinstance(maps, np.ndarray) or not isinstance(maps, (list, tuple)):
            maps = [maps]
    try:
        cross_sections = list(cross_sections)
        maps = list(maps)
    except TypeError:
        raise InputError(
            "cross_sections: expected a CrossSections or a list of them, with maps a list "
            "of (N, H, W) arrays in the same order"
        ) from None
    if len(maps) != len(cross_sections):
        raise InputError(
            f"maps: got {len(maps)} map(s) for {len(cross_sections)} cross-section stack(s); "
            "give one (N, H, W) map per CrossSections, in the same order"
        )
    pairs = []
    for index, (m, cs) in enumerate(zip(maps, cross_sections)):
        if not isinstance(cs, CrossSections):
            raise InputError(
                f"cross_sections[{index}]: expected CrossSections, got {type(cs).__name__}"
            )
        try:
            array = np.asarray(m, dtype=np.float64)
        except (TypeError, ValueError, RuntimeError):
            raise InputError(
                f"maps[{index}]: expected a numeric array (detach torch tensors first), got "
                f"{type(m).__name__}"
            ) from None
        if array.shape != cs.shape:
            raise InputError(
                f"maps[{index}]: expected shape {cs.shape} like its cross-sections, got "
                f"{array.shape}"
            )
        if not np.isfinite(array).all():
            raise InputError(
                f"maps[{index}]: holds NaN or infinite values; replace them before splatting"
            )
        pairs.append((array, cs))
    return pairs


def splat(maps, cross_sections, *, like, return_weight=False):
    """Spread per-pixel maps back into a volume shaped like ``like``.

    Parameters
    ----------
    maps : (N, H, W) array, or a list of them, or an (S, N, H, W) array
        One map per cross-section stack (any units; kept).
    cross_sections : CrossSections, list of CrossSections, or CaseSections
        Where each map's pixels lie (``points_mm``), same order as ``maps``.
    like : SimpleITK.Image
        3D image whose size, origin, spacing and direction the result takes.
    return_weight : bool, optional
        Also return the accumulated trilinear weight per voxel (0 where never hit).

    Returns
    -------
    image : SimpleITK.Image, float32
        Weighted mean of the splatted values per voxel; 0 where no pixel reached.
    weight : SimpleITK.Image, float32
        Only with ``return_weight=True``: the accumulated weight (coverage).

    Notes
    -----
    Pixels whose position lies outside ``like`` (continuous index outside
    ``[0, size - 1]``) are skipped, exactly as sampling fills them.

    Examples
    --------
    >>> import SimpleITK as sitk
    >>> from explain.geometry import Centerline, sample_cross_sections
    >>> image = sitk.Image([12, 12, 12], sitk.sitkFloat32)
    >>> cs = sample_cross_sections(image, Centerline([[6.0, 6, 2], [6, 6, 9]]),
    ...                            points=8, size=3, pixel_mm=1.0)
    >>> out, weight = splat(np.full(cs.shape, 7.0), cs, like=image, return_weight=True)
    >>> arr = sitk.GetArrayFromImage(out)
    >>> float(arr[sitk.GetArrayFromImage(weight) > 0].min()), float(arr.max())
    (7.0, 7.0)
    """
    grid = Grid(like, name="like", with_values=False)
    pairs = _pair_up(maps, cross_sections)
    total_pixels = sum(values.size for values, _ in pairs)
    # Eight corner entries per pixel, written straight into preallocated arrays.
    flat = np.empty(8 * total_pixels, dtype=np.intp)
    weight_of = np.empty(8 * total_pixels, dtype=np.float64)
    value_of = np.empty(8 * total_pixels, dtype=np.float64)
    used = 0
    for vals, cs in pairs:
        index = grid.index_of(cs.points_mm.reshape(-1, 3))
        base, (di, dj, dk), wi, wj, wk, inside = grid.corners(
            index[:, 0], index[:, 1], index[:, 2], dtype=np.float64
        )
        vals = vals.reshape(-1)
        if inside is not None:
            base, vals, wi, wj, wk = (a[inside] for a in (base, vals, wi, wj, wk))
        n = base.size
        if n == 0:
            continue
        # (2, 2, 2, n): lower and upper corner along i, j, k.
        fi, fj, fk = (np.stack([1.0 - w, w]) for w in (wi, wj, wk))
        chunk = slice(used, used + 8 * n)
        w = weight_of[chunk].reshape(2, 2, 2, n)
        np.multiply((fi[:, None] * fj[None, :])[:, :, None], fk[None, None, :], out=w)
        np.multiply(w, vals, out=value_of[chunk].reshape(2, 2, 2, n))
        step = (
            np.array([0, di])[:, None, None]
            + np.array([0, dj])[None, :, None]
            + np.array([0, dk])[None, None, :]
        )
        np.add(base, step[..., None], out=flat[chunk].reshape(2, 2, 2, n))
        used += 8 * n
    n_voxels = int(np.prod(grid.size))
    weight = np.zeros(n_voxels, dtype=np.float64)
    mean = np.zeros(n_voxels, dtype=np.float32)
    if used:
        flat, weight_of, value_of = flat[:used], weight_of[:used], value_of[:used]
        # One bincount over the touched span only, so its output stays small.
        lo, hi = int(flat.min()), int(flat.max()) + 1
        flat -= lo
        span_weight = np.bincount(flat, weights=weight_of, minlength=hi - lo)
        span_total = np.bincount(flat, weights=value_of, minlength=hi - lo)
        np.divide(span_total, span_weight, out=span_total, where=span_weight > 0)
        mean[lo:hi] = span_total  # 0 / never-hit stays 0 (bincount gives 0 there)
        weight[lo:hi] = span_weight
    out = _to_image(mean, grid, like)
    if return_weight:
        return out, _to_image(weight.astype(np.float32), grid, like)
    return out


def _to_image(flat, grid, like):
    image = sitk.GetImageFromArray(flat.reshape(grid.shape))
    image.SetOrigin(like.GetOrigin())
    image.SetSpacing(like.GetSpacing())
    image.SetDirection(like.GetDirection())
    return image
