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

__all__ = ["splat"]


def _pair_up(maps, cross_sections):
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
        except (TypeError, ValueError):
            raise InputError(f"maps[{index}]: expected a numeric array, got {type(m).__name__}") from None
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
    maps : (N, H, W) array or list of them
        One map per cross-section stack (any units; kept).
    cross_sections : CrossSections or list of CrossSections
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
    n_voxels = int(np.prod(grid.size))
    total = np.zeros(n_voxels, dtype=np.float64)
    weight = np.zeros(n_voxels, dtype=np.float64)
    for values, cs in pairs:
        index = grid.index_of(cs.points_mm.reshape(-1, 3))
        base, (di, dj, dk), wi, wj, wk, inside = grid.corners(index[:, 0], index[:, 1], index[:, 2])
        if not inside.any():
            continue
        base = base[inside]
        vals = values.reshape(-1)[inside]
        wi, wj, wk = (w[inside].astype(np.float64) for w in (wi, wj, wk))
        flats, weights = [], []
        for oi, fi in ((0, 1.0 - wi), (di, wi)):
            for oj, fj in ((0, 1.0 - wj), (dj, wj)):
                fij = fi * fj
                for ok, fk in ((0, 1.0 - wk), (dk, wk)):
                    flats.append(base + (oi + oj + ok))
                    weights.append(fij * fk)
        flat = np.concatenate(flats)
        w = np.concatenate(weights)
        # Bin only over the touched span so bincount's output stays small.
        lo, hi = int(flat.min()), int(flat.max()) + 1
        local = flat - lo
        weight[lo:hi] += np.bincount(local, weights=w, minlength=hi - lo)
        total[lo:hi] += np.bincount(local, weights=w * np.tile(vals, 8), minlength=hi - lo)
    covered = weight > 0
    mean = np.zeros(n_voxels, dtype=np.float32)
    mean[covered] = total[covered] / weight[covered]
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
