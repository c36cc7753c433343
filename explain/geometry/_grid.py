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
    flat : (nk * nj * ni,) float32 or None
        The voxels in C order, if asked for.
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
        self.flat = None
        if with_values:
            if image.GetPixelID() == sitk.sitkFloat32:
                # A view, no copy: the caller keeps `image` alive while this grid is used.
                self._image = image
                array = sitk.GetArrayViewFromImage(image)
            else:
                array = sitk.GetArrayFromImage(sitk.Cast(image, sitk.sitkFloat32))
            self.flat = np.ascontiguousarray(array).reshape(-1)

    def index_of(self, points_mm):
        """Continuous index (i, j, k) of physical points, shape ``(..., 3)``."""
        return (np.asarray(points_mm, dtype=np.float64) - self.origin) @ self.index_matrix.T

    def corners(self, ci, cj, ck):
        """Floor corner, trilinear weights and inside mask of continuous indices.

        Parameters
        ----------
        ci, cj, ck : (P,) float64
            Continuous index along i, j, k.

        Returns
        -------
        base : (P,) intp
            Flat index of the lower corner (clipped inside the grid).
        offsets : (3,) int
            Flat step to the upper corner along i, j, k (0 along an axis of one voxel).
        wi, wj, wk : (P,) float32
            Weight of the upper corner along each axis.
        inside : (P,) bool
            Index within ``[0, size - 1]`` (up to ``INDEX_TOLERANCE``) on all three axes.
        """
        ni, nj, nk = (int(n) for n in self.size)
        inside = np.ones(ci.shape, dtype=bool)
        floors, weights = [], []
        for c, n in ((ci, ni), (cj, nj), (ck, nk)):
            inside &= (c >= -INDEX_TOLERANCE) & (c <= n - 1 + INDEX_TOLERANCE)
            c = np.clip(c, 0.0, n - 1)
            # c >= 0, so truncation is floor; the top voxel uses the cell below it (weight 1).
            f = np.minimum(c.astype(np.intp), max(n - 2, 0))
            floors.append(f)
            weights.append((c - f).astype(np.float32))
        fi, fj, fk = floors
        base = (fk * nj + fj) * ni + fi
        offsets = (1 if ni > 1 else 0, ni if nj > 1 else 0, ni * nj if nk > 1 else 0)
        return base, offsets, weights[0], weights[1], weights[2], inside


def trilinear(flat, base, offsets, wi, wj, wk):
    """Trilinear interpolation from the eight corners (float32 throughout)."""
    di, dj, dk = offsets
    b1 = base + dk
    v000 = flat.take(base)
    v100 = flat.take(base + di)
    v010 = flat.take(base + dj)
    v110 = flat.take(base + (di + dj))
    v001 = flat.take(b1)
    v101 = flat.take(b1 + di)
    v011 = flat.take(b1 + dj)
    v111 = flat.take(b1 + (di + dj))
    c00 = v000 + wi * (v100 - v000)
    c10 = v010 + wi * (v110 - v010)
    c01 = v001 + wi * (v101 - v001)
    c11 = v011 + wi * (v111 - v011)
    c0 = c00 + wj * (c10 - c00)
    c1 = c01 + wj * (c11 - c01)
    return c0 + wk * (c1 - c0)
