"""Cross-sections of a CT image perpendicular to a centerline.

Pixel placement follows docs/architecture.md: with frame rows ``tangent, normal, binormal``
and in-plane axes ``u = cos(r) normal + sin(r) binormal``, ``v = -sin(r) normal + cos(r)
binormal`` (r = ``rotation_deg``), pixel ``[row, col]`` of section ``n`` lies at
``centre_n + (col - (W-1)/2) * pixel_mm * u + (row - (H-1)/2) * pixel_mm * v``.
Values are trilinear in voxel-index space, vectorised over all pixels at once, read from the
box of voxels around each stack only (kept in the image's stored type until then).
"""

from __future__ import annotations

import math
import numbers
from dataclasses import dataclass

import numpy as np

from ..errors import InputError
from ._grid import Grid, trilinear
from .centerline import Centerline, rotation_minimizing_frames

__all__ = ["CrossSections", "sample_cross_sections"]


@dataclass(frozen=True, eq=False)
class CrossSections:
    """A stack of cross-sections along one centerline, with the geometry of every pixel.

    Attributes
    ----------
    values : (N, H, W) float32, HU
        Trilinear samples of the image; pixels outside it hold ``fill_value``.
    points_mm : (N, H, W, 3) float64, mm
        Physical position x, y, z of each pixel.
    arc_mm : (N,) float64, mm
        Arc length of each section's centre along the centerline.
    frames : (N, 3, 3) float64
        Rows ``tangent, normal, binormal`` at each centre (rotation-minimizing).
    pixel_mm : float
        In-plane pixel size, mm.
    rotation_deg : float
        Rotation of the in-plane axes about the tangent, degrees.
    fill_value : float
        HU given to pixels outside the image.
    n_outside : int
        Number of pixels outside the image.
    """

    values: np.ndarray
    points_mm: np.ndarray
    arc_mm: np.ndarray
    frames: np.ndarray
    pixel_mm: float
    rotation_deg: float
    fill_value: float
    n_outside: int

    def __post_init__(self):
        values = np.asarray(self.values)
        if values.ndim != 3:
            raise InputError(f"CrossSections.values: expected (N, H, W), got shape {values.shape}")
        n, h, w = values.shape
        expected = {
            "points_mm": (n, h, w, 3),
            "arc_mm": (n,),
            "frames": (n, 3, 3),
        }
        for field, shape in expected.items():
            got = np.shape(getattr(self, field))
            if got != shape:
                raise InputError(
                    f"CrossSections.{field}: expected shape {shape} to match values "
                    f"{values.shape}, got {got}"
                )

    @property
    def shape(self):
        """``(N, H, W)``."""
        return self.values.shape

    def __repr__(self):
        n, h, w = self.shape
        arc = f"{self.arc_mm[0]:.1f}-{self.arc_mm[-1]:.1f} mm" if n else "empty"
        return (
            f"CrossSections({n} sections x {h}x{w} px at {self.pixel_mm:g} mm, arc {arc}, "
            f"rotation {self.rotation_deg:g} deg, values float32 HU, "
            f"{self.n_outside} px outside (filled {self.fill_value:g} HU))"
        )


def _positive_int(value, name, minimum):
    if isinstance(value, bool) or not isinstance(value, numbers.Integral) or value < minimum:
        raise InputError(f"{name}: expected an integer >= {minimum}, got {value!r}")
    return int(value)


def _real(value, name, *, positive=False, allow_nan=False):
    if isinstance(value, bool) or not isinstance(value, numbers.Real):
        raise InputError(f"{name}: expected a number, got {value!r}")
    value = float(value)
    if math.isnan(value) and allow_nan:
        return value
    if not math.isfinite(value) or (positive and value <= 0):
        kind = "a finite number > 0" if positive else "a finite number"
        raise InputError(f"{name}: expected {kind}, got {value!r}")
    return value


def check_options(points, size, pixel_mm, rotation_deg, fill_value):
    """Validate the sampling options; returns them converted."""
    return (
        _positive_int(points, "points", 2),
        _positive_int(size, "size", 1),
        _real(pixel_mm, "pixel_mm", positive=True),
        _real(rotation_deg, "rotation_deg"),
        _real(fill_value, "fill_value", allow_nan=True),
    )


def sample_on_grid(grid, centerline, *, points, size, pixel_mm, rotation_deg, fill_value):
    """:func:`sample_cross_sections` on an already built :class:`Grid` (options checked)."""
    if not isinstance(centerline, Centerline):
        raise InputError(
            f"centerline: expected an explain.geometry.Centerline, got {type(centerline).__name__}"
        )
    centres, arc, tangents = centerline.even_samples(points)
    frames = rotation_minimizing_frames(centres, tangents)
    r = math.radians(rotation_deg)
    normal, binormal = frames[:, 1], frames[:, 2]
    u = math.cos(r) * normal + math.sin(r) * binormal
    v = -math.sin(r) * normal + math.cos(r) * binormal
    # Pixel (row, col) of every section is centre + a_col u + b_row v: one small matrix
    # product per section (BLAS) gives all positions, and, mapped through the affine index
    # map, all continuous indices.
    offset = (np.arange(size, dtype=np.float64) - (size - 1) / 2.0) * pixel_mm
    basis = np.empty((3, size * size))
    basis[0] = 1.0
    basis[1] = np.tile(offset, size)  # col, fastest
    basis[2] = np.repeat(offset, size)  # row
    points_mm = np.matmul(basis.T, np.stack([centres, u, v], axis=1)).reshape(
        points, size, size, 3
    )
    m = grid.index_matrix
    per_section = np.stack([(centres - grid.origin) @ m.T, u @ m.T, v @ m.T], axis=2)
    index = np.matmul(per_section, basis)  # (N, 3 axes i j k, H*W)
    # Only the box of voxels this stack reads is converted to float32 (Grid.crop), with the
    # very values and weights sampling the whole image would give.
    block, ci, cj, ck = grid.crop(index[:, 0], index[:, 1], index[:, 2])
    base, offsets, wi, wj, wk, inside = block.corners(ci, cj, ck)
    values = trilinear(block.flat, base, offsets, wi, wj, wk)
    n_outside = 0
    if inside is not None:
        n_outside = int(inside.size - np.count_nonzero(inside))
        values[~inside] = fill_value
    values = values.reshape(points, size, size)
    for array in (values, points_mm, arc, frames):
        array.setflags(write=False)
    return CrossSections(
        values=values,
        points_mm=points_mm,
        arc_mm=arc,
        frames=frames,
        pixel_mm=pixel_mm,
        rotation_deg=rotation_deg,
        fill_value=fill_value,
        n_outside=n_outside,
    )


def sample_cross_sections(
    image, centerline, *, points, size, pixel_mm, rotation_deg=0.0, fill_value=-1000.0
):
    """Sample square cross-sections of ``image`` perpendicular to ``centerline``.

    The centerline is resampled to ``points`` points evenly spaced in arc length, frames are
    rotation-minimizing (double reflection), and each pixel is trilinear in voxel-index
    space using the image's origin, spacing and direction.

    Parameters
    ----------
    image : SimpleITK.Image
        3D scalar image, HU, of any pixel type (the voxels read are converted to float32).
    centerline : Centerline
        In the image's physical space, mm.
    points : int
        Number of sections N (>= 2), first and last at the centerline's ends.
    size : int
        Pixels per side H = W.
    pixel_mm : float
        In-plane pixel size, mm.
    rotation_deg : float, optional
        Rotation of the in-plane axes about the tangent, degrees.
    fill_value : float, optional
        HU for pixels outside the image (default -1000, air); they are counted in
        ``n_outside``.

    Returns
    -------
    CrossSections

    Examples
    --------
    >>> import SimpleITK as sitk
    >>> image = sitk.Image([20, 20, 20], sitk.sitkFloat32) + 40.0
    >>> line = Centerline([[10.0, 10.0, 2.0], [10.0, 10.0, 17.0]])
    >>> cs = sample_cross_sections(image, line, points=4, size=5, pixel_mm=1.0)
    >>> cs.values.shape, float(cs.values.mean()), cs.n_outside
    ((4, 5, 5), 40.0, 0)
    """
    points, size, pixel_mm, rotation_deg, fill_value = check_options(
        points, size, pixel_mm, rotation_deg, fill_value
    )
    grid = Grid(image)
    return sample_on_grid(
        grid,
        centerline,
        points=points,
        size=size,
        pixel_mm=pixel_mm,
        rotation_deg=rotation_deg,
        fill_value=fill_value,
    )
