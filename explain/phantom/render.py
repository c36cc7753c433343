"""Rendering tubes into a CT-like volume, one small box at a time.

Each segment is two tubes around polylines with a radius per point: the outer wall (healthy
radius, bulging at lesions) and the lumen (narrowed at lesions, its axis pushed aside for an
eccentric lesion). A tube is cut into pieces of a few mm; for each piece only the voxels of its
own bounding box are visited, and their distance to the piece's polyline is computed with array
operations. Partial volume is drawn by an antialiased occupancy (the fraction of a voxel inside
the tube, linear over one voxel), then the whole volume gets a Gaussian blur (the scanner's
point spread) and seeded Gaussian noise.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from scipy import ndimage

__all__ = ["Grid", "Tube", "tube_distance", "render_volume"]

_PIECE_EDGES = 16  # polyline edges per box: boxes stay small, distance arrays stay short


@dataclass(frozen=True)
class Grid:
    """A voxel grid: index ``(i, j, k)`` lies at ``origin + direction @ (spacing * (i, j, k))``.

    Attributes
    ----------
    origin : (3,) float64, mm
    spacing : float, mm (isotropic)
    direction : (3, 3) float64, orthonormal columns (SimpleITK's direction matrix)
    size : (3,) int, voxels along i, j, k
    """

    origin: np.ndarray
    spacing: float
    direction: np.ndarray
    size: tuple

    @classmethod
    def around(cls, points_mm, *, spacing, margin_mm, direction=None):
        """The smallest grid of this spacing and direction holding ``points_mm`` plus a margin."""
        direction = np.eye(3) if direction is None else np.asarray(direction, dtype=np.float64)
        local = np.asarray(points_mm) @ direction  # coordinates along the grid's axes
        lo = local.min(axis=0) - margin_mm
        hi = local.max(axis=0) + margin_mm
        size = tuple(int(n) for n in np.ceil((hi - lo) / spacing).astype(int) + 1)
        return cls(direction @ lo, float(spacing), direction, size)

    def index_of(self, points_mm):
        """Continuous indices (i, j, k) of physical points, shape (..., 3)."""
        return (np.asarray(points_mm) - self.origin) @ self.direction / self.spacing

    def box(self, points_mm, pad_mm):
        """Index ranges ``(lo, hi)`` (inclusive, exclusive) of voxels within ``pad_mm``."""
        index = self.index_of(points_mm)
        pad = pad_mm / self.spacing
        lo = np.maximum(np.floor(index.min(axis=0) - pad).astype(int), 0)
        hi = np.minimum(np.ceil(index.max(axis=0) + pad).astype(int) + 1, self.size)
        return lo, hi

    def centres(self, lo, hi):
        """Physical centres of the voxels of a box, shape (nk, nj, ni, 3), array order."""
        k, j, i = np.meshgrid(*(np.arange(lo[a], hi[a]) for a in (2, 1, 0)), indexing="ij")
        index = np.stack([i, j, k], axis=-1) * self.spacing
        return self.origin + index @ self.direction.T


@dataclass(frozen=True)
class Tube:
    """One segment ready to draw (all arrays per centerline point, n points).

    Attributes
    ----------
    points_mm : (n, 3) outer wall axis; wall_mm : (n,) outer wall radius
    lumen_points_mm : (n, 3) lumen axis; lumen_mm : (n,) lumen radius
    arc_mm : (n,) arc length along the vessel's centerline (for the mask's extents)
    plaque_hu : (n,) plaque attenuation to use near each point
    lesions : tuple of (start_mm, end_mm, label) for the lesion mask
    """

    points_mm: np.ndarray = field(repr=False)
    wall_mm: np.ndarray = field(repr=False)
    lumen_points_mm: np.ndarray = field(repr=False)
    lumen_mm: np.ndarray = field(repr=False)
    arc_mm: np.ndarray = field(repr=False)
    plaque_hu: np.ndarray = field(repr=False)
    lesions: tuple = ()


def tube_distance(x, points, radius):
    """Signed distance-like field of a tube with a radius per point.

    Parameters
    ----------
    x : (m, 3) float, mm
        Query points.
    points : (n, 3) float, mm
        Polyline, n >= 2.
    radius : (n,) float, mm
        Radius at each polyline point, linear along each edge.

    Returns
    -------
    f : (m,) float64
        ``min over edges of (distance to the edge - radius there)``; negative inside.
    edge : (m,) int
        Index of the nearest edge.
    t : (m,) float64
        Position on that edge, 0 at ``points[edge]``, 1 at ``points[edge + 1]``.
    r : (m,) float64
        Radius at the nearest position.

    Examples
    --------
    >>> f, edge, t, r = tube_distance(np.array([[0.0, 3.0, 5.0]]),
    ...                               np.array([[0.0, 0, 0], [0, 0, 10]]), np.array([1.0, 1.0]))
    >>> float(f[0]), float(t[0])
    (2.0, 0.5)
    """
    a = points[:-1]
    ab = points[1:] - a
    length2 = np.maximum(np.einsum("ij,ij->i", ab, ab), 1e-12)
    # (x - a).ab and |x - a|^2 by matrix products: no (m, edges, 3) temporaries
    ax_ab = x @ ab.T - np.einsum("ij,ij->i", a, ab)
    ax2 = np.einsum("ij,ij->i", x, x)[:, None] - 2.0 * (x @ a.T) + np.einsum("ij,ij->i", a, a)
    t = np.clip(ax_ab / length2, 0.0, 1.0)
    d = np.sqrt(np.maximum(ax2 - 2.0 * t * ax_ab + t * t * length2, 0.0))
    r = radius[:-1] + t * (radius[1:] - radius[:-1])
    f = d - r
    edge = np.argmin(f, axis=1)
    rows = np.arange(len(x))
    return f[rows, edge], edge, t[rows, edge], r[rows, edge]


def _occupancy(f, r, h):
    """Fraction of a voxel of size h inside a tube (linear ramp over one voxel), thin-tube aware."""
    return np.clip(0.5 - f / h, 0.0, 1.0) * np.clip(2.0 * r / h, 0.0, 1.0)


def _draw_piece(grid, tube, lo_pt, hi_pt, fields):
    wall_fv, lumen_fl, plaque, mask = fields
    h = grid.spacing
    sl = slice(lo_pt, hi_pt + 1)
    pts, wall = tube.points_mm[sl], tube.wall_mm[sl]
    lpts, lumen = tube.lumen_points_mm[sl], tube.lumen_mm[sl]
    pad = float(max(wall.max(), lumen.max())) + 1.5 * h
    lo, hi = grid.box(np.concatenate([pts, lpts]), pad)
    if np.any(hi <= lo):
        return
    x = grid.centres(lo, hi)
    shape = x.shape[:3]
    x = x.reshape(-1, 3)
    box = (slice(lo[2], hi[2]), slice(lo[1], hi[1]), slice(lo[0], hi[0]))
    f_w, edge, t, r_w = tube_distance(x, pts, wall)
    f_l, _, _, r_l = tube_distance(x, lpts, lumen)
    fv = _occupancy(f_w, r_w, h)
    fl = _occupancy(f_l, r_l, h)
    arc = tube.arc_mm[sl]
    s = arc[edge] + t * (arc[edge + 1] - arc[edge])
    hu = tube.plaque_hu[sl]
    near_hu = np.where(t < 0.5, hu[edge], hu[edge + 1])
    has_plaque = (fv - fl) > 1e-3
    view = plaque[box].reshape(-1)
    view[has_plaque] = near_hu[has_plaque]
    plaque[box] = view.reshape(shape)
    wall_fv[box] = np.maximum(wall_fv[box], fv.reshape(shape))
    lumen_fl[box] = np.maximum(lumen_fl[box], fl.reshape(shape))
    if tube.lesions:
        label = np.zeros(len(x), dtype=np.uint8)
        inside = f_w <= 0.0
        for start, end, value in tube.lesions:
            label[inside & (s >= start) & (s <= end)] = value
        m = mask[box]
        mask[box] = np.where(label.reshape(shape) > 0, label.reshape(shape), m)


def render_volume(grid, tubes, *, lumen_hu, background_hu, blur_sigma_mm, noise_sd_hu, rng):
    """Draw tubes over a background, blur, add noise.

    Parameters
    ----------
    grid : Grid
    tubes : sequence of Tube
    lumen_hu : float
        Attenuation of the enhanced lumen.
    background_hu : (nk, nj, ni) float32
        Tissue outside the vessels (myocardium and fat), array order.
    blur_sigma_mm : float
        Gaussian point spread, mm (0: none).
    noise_sd_hu : float
        Standard deviation of the added white Gaussian noise (0: none).
    rng : numpy.random.Generator
        Noise stream.

    Returns
    -------
    hu : (nk, nj, ni) float32
        The volume, rounded to whole HU as a scanner stores it.
    mask : (nk, nj, ni) uint8
        Lesion labels (1 + lesion index) inside the outer wall over each lesion's extent, 0 elsewhere.
    """
    shape = tuple(reversed(grid.size))
    wall_fv = np.zeros(shape, np.float32)
    lumen_fl = np.zeros(shape, np.float32)
    plaque = np.zeros(shape, np.float32)
    mask = np.zeros(shape, np.uint8)
    for tube in tubes:
        n = len(tube.points_mm)
        for lo_pt in range(0, n - 1, _PIECE_EDGES):
            _draw_piece(grid, tube, lo_pt, min(lo_pt + _PIECE_EDGES, n - 1),
                        (wall_fv, lumen_fl, plaque, mask))
    vessel = np.maximum(wall_fv, lumen_fl)
    hu = lumen_fl * np.float32(lumen_hu) + (vessel - lumen_fl) * plaque \
        + (1.0 - vessel) * background_hu
    if blur_sigma_mm > 0:
        hu = ndimage.gaussian_filter(hu, blur_sigma_mm / grid.spacing, mode="nearest")
    if noise_sd_hu > 0:
        hu += rng.standard_normal(shape, dtype=np.float32) * np.float32(noise_sd_hu)
    return np.clip(np.round(hu), -1024, 3071).astype(np.float32), mask


def sphere_background(grid, centre_mm, radius_mm, *, inside_hu, outside_hu):
    """A sphere of ``inside_hu`` (antialiased edge) in ``outside_hu``, array order (nk, nj, ni)."""
    size = grid.size
    axes = [np.arange(n) * grid.spacing for n in size]
    offset = grid.origin - np.asarray(centre_mm)
    # physical = origin + sum_a idx_a * spacing * direction[:, a]; squared distance, separable.
    comp = [offset[c] + axes[0][None, None, :] * grid.direction[c, 0]
            + axes[1][None, :, None] * grid.direction[c, 1]
            + axes[2][:, None, None] * grid.direction[c, 2] for c in range(3)]
    dist = np.sqrt(sum(np.square(c, dtype=np.float32) for c in comp))
    inside = np.clip(0.5 - (dist - radius_mm) / grid.spacing, 0.0, 1.0).astype(np.float32)
    return inside * np.float32(inside_hu) + (1.0 - inside) * np.float32(outside_hu)
