"""Voxel grid of a SimpleITK image: physical <-> index maps and trilinear corners.

Shared by sampling (gather) and splatting (scatter) so both use the very same index map and
the very same corner weights.

SimpleITK maps a continuous index ``idx = (i, j, k)`` to a physical point by
``p = origin + D @ diag(spacing) @ idx`` (``TransformContinuousIndexToPhysicalPoint``);
here the inverse ``idx = inv(D @ diag(spacing)) @ (p - origin)`` is applied with numpy.
"""

from __future__ import annotations

import numpy as np
import SimpleITK as sitk

from ..errors import InputError

# A point whose continuous index lies this far (in voxels) outside [0, size - 1] still counts
# as inside; it absorbs round-off for points placed exactly on the outermost voxel centres.
INDEX_TOLERANCE = 1e-6


class Grid:
    """Geometry (and optionally the voxels) of a 3D scalar SimpleITK image.

    Attributes
    ----------
    size : (3,) int
        Voxels along i, j, k.
    shape : tuple
        NumPy shape ``(nk, nj, ni)``.
    origin : (3,) float64, mm
    index_matrix : (3, 3) float64, 1/mm
        ``inv(D @ diag(spacing))``.

    With ``with_values`` the grid keeps the image, whose voxels :meth:`crop` reads.
    """

    def __init__(self, image, *, name="image", with_values=True):
        if not isinstance(image, sitk.Image):
            raise InputError(
                f"{name}: expected a SimpleITK image (SimpleITK.Image), got "
                f"{type(image).__name__}; read it with explain.io.read_image"
            )
        if image.GetDimension() != 3:
            raise InputError(f"{name}: expected a 3D image, got {image.GetDimension()}D")
        if image.GetNumberOfComponentsPerPixel() != 1:
            raise InputError(
                f"{name}: expected a scalar image, got "
                f"{image.GetNumberOfComponentsPerPixel()} components per voxel"
            )
        self.size = np.array(image.GetSize(), dtype=np.int64)
        self.shape = tuple(int(n) for n in self.size[::-1])
        self.origin = np.array(image.GetOrigin(), dtype=np.float64)
        self.spacing = np.array(image.GetSpacing(), dtype=np.float64)
        self.direction = np.array(image.GetDirection(), dtype=np.float64).reshape(3, 3)
        affine = self.direction * self.spacing[None, :]
        if abs(np.linalg.det(affine)) < 1e-12:
            raise InputError(f"{name}: its direction matrix is singular; the image is malformed")
        self.index_matrix = np.linalg.inv(affine)
        # The voxels are read only where a crop asks for them (see `crop`), in the image's own
        # pixel type until then: a full-size scan is never copied to float32.
        self._image = image if with_values else None

    def index_of(self, points_mm):
        """Continuous index (i, j, k) of physical points, shape ``(..., 3)``."""
        d = np.asarray(points_mm, dtype=np.float64) - self.origin
        m = self.index_matrix
        # Written out per axis: a tall (P, 3) @ (3, 3) product goes to multi-threaded BLAS,
        # which is slower than this on a busy machine.
        out = np.empty(d.shape)
        for axis in range(3):
            np.multiply(d[..., 0], m[axis, 0], out=out[..., axis])
            out[..., axis] += d[..., 1] * m[axis, 1]
            out[..., axis] += d[..., 2] * m[axis, 2]
        return out

    def corners(self, ci, cj, ck, *, dtype=np.float32):
        """Floor corner, trilinear weights and inside mask: :func:`corners` on this grid."""
        return corners(self.size, ci, cj, ck, dtype=dtype)

    def crop(self, ci, cj, ck):
        """The voxels the trilinear corners of these indices read, as float32, and the indices
        shifted into that block.

        Per axis the block runs from the floor of the smallest index to one past the floor of
        the largest, kept within the image and at least two voxels long (one for an axis of one
        voxel). The shifted indices ``c - lo`` are exact in float64, and the block's clipping,
        top-voxel rule and inside mask give the same corners, weights and mask as the whole
        image would: sampling a block gives the very values sampling the whole image gives.

        Returns
        -------
        block : VoxelBlock
        ci, cj, ck : float64 arrays
            The indices relative to the block's first voxel.
        """
        if self._image is None:
            raise InputError("Grid.crop: this grid was built without its image's values")
        lows, highs, shifted = [], [], []
        for c, n in zip((ci, cj, ck), (int(v) for v in self.size)):
            if n == 1:
                lo = hi = 0
            else:
                lo = min(max(int(np.floor(c.min())), 0), n - 2)
                hi = min(max(int(np.floor(c.max())) + 1, lo + 1), n - 1)
            lows.append(lo)
            highs.append(hi)
            shifted.append(c - lo if lo else c)
        array = sitk.GetArrayViewFromImage(self._image)
        box = array[lows[2]:highs[2] + 1, lows[1]:highs[1] + 1, lows[0]:highs[0] + 1]
        block = VoxelBlock(np.ascontiguousarray(box, dtype=np.float32), lows)
        return (block, *shifted)


class VoxelBlock:
    """A box of an image's voxels as float32, for trilinear reads (from :meth:`Grid.crop`).

    Attributes
    ----------
    size : (3,) int
        Voxels along i, j, k.
    start : (3,) int
        Index i, j, k of its first voxel in the whole image.
    flat : (nk * nj * ni,) float32
        The voxels in C order.
    """

    def __init__(self, array, start):
        self.size = np.array(array.shape[::-1], dtype=np.int64)
        self.start = np.array(start, dtype=np.int64)
        self.flat = array.reshape(-1)

    def corners(self, ci, cj, ck, *, dtype=np.float32):
        """:func:`corners` on this block."""
        return corners(self.size, ci, cj, ck, dtype=dtype)


def corners(size, ci, cj, ck, *, dtype=np.float32):
    """Floor corner, trilinear weights and inside mask of continuous indices.

    Parameters
    ----------
    size : (3,) int
        Voxels along i, j, k of the grid indexed.
    ci, cj, ck : float64 arrays of one shape
        Continuous index along i, j, k.

    Returns
    -------
    base : intp array, same shape
        Flat index of the lower corner (clipped inside the grid).
    offsets : (3,) int
        Flat step to the upper corner along i, j, k (0 along an axis of one voxel).
    wi, wj, wk : arrays of ``dtype`` (float32 by default), same shape
        Weight of the upper corner along each axis.
    inside : bool array or None
        Index within ``[0, size - 1]`` (up to ``INDEX_TOLERANCE``) on all three axes;
        None when every point is inside.
    """
    ni, nj, nk = (int(n) for n in size)
    inside = None
    floors, weights = [], []
    for c, n in ((ci, ni), (cj, nj), (ck, nk)):
        # Range checks first: the masks and clipping are only paid for when needed.
        low, high = float(c.min()), float(c.max())
        if low < -INDEX_TOLERANCE or high > n - 1 + INDEX_TOLERANCE:
            ok = (c >= -INDEX_TOLERANCE) & (c <= n - 1 + INDEX_TOLERANCE)
            inside = ok if inside is None else inside & ok
        if low < 0.0 or high > n - 1:
            c = np.clip(c, 0.0, n - 1)
        # c >= 0, so truncation is floor; the top voxel uses the cell below it (weight 1).
        f = c.astype(np.intp)
        if high >= n - 1:
            np.minimum(f, max(n - 2, 0), out=f)
        w = np.empty(c.shape, dtype=dtype)
        np.subtract(c, f, out=w, casting="same_kind")
        floors.append(f)
        weights.append(w)
    fi, fj, fk = floors
    fk *= ni * nj
    fj *= ni
    fk += fj
    fk += fi
    offsets = (1 if ni > 1 else 0, ni if nj > 1 else 0, ni * nj if nk > 1 else 0)
    return fk, offsets, weights[0], weights[1], weights[2], inside


def _lerp(a, b, w):
    """``a + w (b - a)``, written into ``b`` (saves allocations on large arrays)."""
    np.subtract(b, a, out=b)
    b *= w
    b += a
    return b


def trilinear(flat, base, offsets, wi, wj, wk):
    """Trilinear interpolation from the eight corners (float32 throughout).

    Parameters
    ----------
    flat : (V,) float32
        Voxels in C order.
    base, offsets, wi, wj, wk
        As returned by :meth:`Grid.corners`.

    Returns
    -------
    float32 array shaped like ``base``
    """
    di, dj, dk = offsets

    def corner(offset):
        # Taking `base` from a view shifted by `offset` reads flat[base + offset] without
        # forming the sum (base + offset <= size - 1 by construction of the corners).
        return flat[offset:].take(base)

    c0 = _lerp(
        _lerp(corner(0), corner(di), wi), _lerp(corner(dj), corner(di + dj), wi), wj
    )
    c1 = _lerp(
        _lerp(corner(dk), corner(dk + di), wi), _lerp(corner(dk + dj), corner(dk + di + dj), wi), wj
    )
    return _lerp(c0, c1, wk)
