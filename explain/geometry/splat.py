"""Put maps computed on cross-sections back into the scan's voxel grid.

Splatting is the adjoint of trilinear sampling: each pixel spreads its value to the eight
voxels around its position with the same trilinear weights sampling would use, and each voxel
is the weighted mean of what it received (overlapping sections average). Sums are
accumulated with ``np.bincount`` over the bounding box of the touched voxels
(:func:`splat_box`); :func:`place` puts that box into the whole image's grid.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import SimpleITK as sitk

from ..errors import InputError
from ._grid import Grid
from .sampling import CrossSections
from .stack import CaseSections

__all__ = ["splat", "splat_box", "place", "SplatBox"]


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
    box = splat_box(maps, cross_sections, like=like)
    out = place(box, like)
    if return_weight:
        return out, place(box, like, weight=True)
    return out


@dataclass(frozen=True, eq=False)
class SplatBox:
    """Splatted maps inside the bounding box of the voxels they reached.

    Attributes
    ----------
    start : (3,) int
        Index ``(i, j, k)`` in the whole image of the box's first voxel.
    mean : (nk, nj, ni) float32
        Weighted mean of the splatted values; 0 where no pixel reached.
    weight : (nk, nj, ni) float64
        Accumulated trilinear weight (coverage); 0 where no pixel reached.
    image_size : (3,) int
        Size ``(ni, nj, nk)`` of the whole image.
    """

    start: tuple
    mean: np.ndarray
    weight: np.ndarray
    image_size: tuple

    def __repr__(self):
        size = "x".join(str(n) for n in self.mean.shape[::-1])
        return (f"SplatBox({size} voxels at index {tuple(self.start)} of an image of "
                f"{'x'.join(str(n) for n in self.image_size)}, float32)")


def _corner_entries(grid, pairs):
    """Flat voxel index (whole image), trilinear weight and weighted value of every corner."""
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
    return flat[:used], weight_of[:used], value_of[:used]


def splat_box(maps, cross_sections, *, like):
    """:func:`splat` into the bounding box of the voxels reached, not the whole image.

    Same arguments as :func:`splat`. The sums are the same sums, entry for entry and in the
    same order, so :func:`place` of the result equals :func:`splat` bit for bit; only the box
    is held (a coronary tree in a 512 x 512 x 400 scan reaches a few million voxels).

    Returns
    -------
    SplatBox
    """
    grid = Grid(like, name="like", with_values=False)
    pairs = _pair_up(maps, cross_sections)
    flat, weight_of, value_of = _corner_entries(grid, pairs)
    ni, nj = int(grid.size[0]), int(grid.size[1])
    if flat.size == 0:
        empty = np.zeros((0, 0, 0))
        return SplatBox((0, 0, 0), empty.astype(np.float32), empty, tuple(int(n) for n in grid.size))
    ijk = [flat % ni, (flat // ni) % nj, flat // (ni * nj)]
    start = [int(a.min()) for a in ijk]
    shape = [int(a.max()) - s + 1 for a, s in zip(ijk, start)]  # ni, nj, nk of the box
    local = (ijk[2] - start[2]) * (shape[0] * shape[1]) + (ijk[1] - start[1]) * shape[0] \
        + (ijk[0] - start[0])
    voxels = shape[0] * shape[1] * shape[2]
    weight = np.bincount(local, weights=weight_of, minlength=voxels)
    total = np.bincount(local, weights=value_of, minlength=voxels)
    np.divide(total, weight, out=total, where=weight > 0)  # never-hit stays 0
    box_shape = tuple(shape[::-1])
    return SplatBox(tuple(start), total.astype(np.float32).reshape(box_shape),
                    weight.reshape(box_shape), tuple(int(n) for n in grid.size))


def place(box, like, *, weight=False):
    """The whole-image volume of a :class:`SplatBox`: its box placed in ``like``'s grid.

    Parameters
    ----------
    box : SplatBox
    like : SimpleITK.Image
        The image the box was splatted for (same size; its origin, spacing and direction are
        copied).
    weight : bool
        Place the coverage (as float32) instead of the mean.

    Returns
    -------
    SimpleITK.Image, float32
        0 outside the box.
    """
    grid = Grid(like, name="like", with_values=False)
    if tuple(int(n) for n in grid.size) != tuple(box.image_size):
        raise InputError(f"like: size {tuple(grid.size)} is not the size {box.image_size} the "
                         "box was splatted for; place it in the image it was made for")
    values = box.weight.astype(np.float32) if weight else box.mean
    size = np.asarray(box.image_size, dtype=np.int64)
    if values.size == 0:
        image = sitk.Image([int(n) for n in size], sitk.sitkFloat32)  # zero-filled
    else:
        # Padding the box out to the whole grid writes the scan-sized volume once: no second
        # whole-image buffer is ever held (numpy's would be copied into SimpleITK's).
        lower = np.asarray(box.start, dtype=np.int64)
        upper = size - lower - np.asarray(values.shape[::-1])
        image = sitk.ConstantPad(sitk.GetImageFromArray(values), [int(n) for n in lower],
                                 [int(n) for n in upper], 0.0)
    image.SetOrigin(like.GetOrigin())
    image.SetSpacing(like.GetSpacing())
    image.SetDirection(like.GetDirection())
    return image
