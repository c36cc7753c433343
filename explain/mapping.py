"""Maps back in the scan: profiles along each vessel, their peaks and extents, overlay volumes.

A saliency map of one segment is an array ``(N, H, W)`` on that segment's cross-section stack,
whose pixels know their physical position ``points_mm (N, H, W, 3)`` (x, y, z in mm, ITK LPS, as
SimpleITK reports it). This module reduces such a map to

- a **profile** along the arc: one value per cross-section, the sum of the positive attribution
  in it (``aggregate="positive"``, the default) or of its absolute value (``"absolute"``);
- its **peak**: the cross-section with the largest profile value (the first one on ties, i.e.
  the most proximal), and inside it the pixel of the largest value (largest absolute value
  for ``"absolute"``); pixels tied with it (within a relative 1e-6, as happens inside one
  occlusion window) are resolved toward the cross-section's centre, the centerline; reported as arc mm from the segment's start, physical x, y, z mm and
  voxel i, j, k (SimpleITK ``TransformPhysicalPointToIndex``: the nearest voxel centre);
- its **extent**: the stretch of arc around the peak where the profile stays at or above half
  the peak value, contiguous with the peak, with the two half-value crossings found by linear
  interpolation between neighbouring cross-sections (the usual full width at half maximum).
  A run reaching the end of the segment stops at the end's arc position.

A map with no positive value (or all zero for ``"absolute"``) has no peak and no extent.

Every segment has the same number of cross-sections whatever its length, so a per-section sum
is not comparable between segments; :func:`profile_per_mm` divides it by the spacing of the
cross-sections, giving attribution per mm of arc (what the profile figures plot).

It also builds the volumes that open on the CT: :func:`overlay` (maps splatted into the scan's
geometry by :func:`explain.geometry.splat`; where the stacks of several segments overlap, a voxel
holds the weighted mean of their pixels, so overlapping segments average), :func:`coverage` (the
splat weight: 0 where no cross-section reached, so a viewer can tell "not sampled" from "no
attribution"), and :func:`curve_lumen_label` (a label image of a vessel's lumen around the same
smooth centerline that sampling follows; :func:`lumen_label` does it for a polyline).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import SimpleITK as sitk

from .errors import InputError

__all__ = [
    "AGGREGATES",
    "DEFAULT_RADIUS_MM",
    "Peak",
    "Location",
    "profile",
    "find_peak",
    "half_peak_extent",
    "locate",
    "overlay",
    "overlay_box",
    "lumen_label",
    "profile_per_mm",
    "coverage",
    "curve_lumen_label",
]

AGGREGATES = ("positive", "absolute")

#: Lumen radius used for the label image when the case gives no radius per centerline point.
#: Common practice, no source: about the proximal radius of a major coronary artery
#: (Dodge et al. 1992 give proximal diameters of 3.4-4.5 mm).
DEFAULT_RADIUS_MM = 1.5


@dataclass(frozen=True)
class Peak:
    """Where a segment's map is strongest.

    Attributes
    ----------
    index : int
        Cross-section index (0 = proximal end).
    row, col : int
        Pixel of the largest value inside that cross-section.
    arc_mm : float
        Arc length of that cross-section from the segment's first centerline point, mm.
    xyz_mm : tuple of 3 float
        Physical position of the peak pixel, mm (ITK LPS).
    voxel : tuple of 3 int
        Nearest voxel ``(i, j, k)`` of the CT (may lie outside the image if the pixel does).
    value : float
        Profile value at the peak (aggregate of the map over the cross-section).
    pixel_value : float
        Map value at the peak pixel.
    inside_image : bool
        Whether ``voxel`` lies inside the CT (a pixel near the stack's rim may not).
    """

    index: int
    row: int
    col: int
    arc_mm: float
    xyz_mm: tuple
    voxel: tuple
    value: float
    pixel_value: float
    inside_image: bool = True

    def __repr__(self):
        x, y, z = self.xyz_mm
        return (f"Peak(arc {self.arc_mm:.1f} mm, cross-section {self.index} pixel "
                f"[{self.row}, {self.col}], xyz ({x:.1f}, {y:.1f}, {z:.1f}) mm, "
                f"voxel {self.voxel}, value {self.value:.4g})")


@dataclass(frozen=True)
class Location:
    """Profile, peak and extent of one segment's map.

    Attributes
    ----------
    profile : (N,) float64
        Aggregate of the map per cross-section (see :func:`profile`).
    arc_mm : (N,) float64
        Arc length of each cross-section, mm.
    aggregate : str
        ``"positive"`` or ``"absolute"``.
    peak : Peak or None
        None when the profile has no positive value.
    extent_mm : tuple (start, end) of float, or None
        Arc mm where the profile stays at or above half the peak, around the peak.
    """

    profile: np.ndarray
    arc_mm: np.ndarray
    aggregate: str
    peak: Peak | None
    extent_mm: tuple | None

    @property
    def per_mm(self):
        """The profile as attribution per mm of arc, (N,) float64 (:func:`profile_per_mm`)."""
        return profile_per_mm(self.profile, self.arc_mm)

    def __repr__(self):
        where = "no peak" if self.peak is None else (
            f"peak at {self.peak.arc_mm:.1f} mm, extent {self.extent_mm[0]:.1f}-"
            f"{self.extent_mm[1]:.1f} mm")
        return f"Location({self.profile.shape[0]} cross-sections, {self.aggregate}, {where})"


def _check_aggregate(aggregate):
    if aggregate not in AGGREGATES:
        raise InputError(f"aggregate: expected one of {', '.join(AGGREGATES)}, got {aggregate!r}")


def profile(map_, *, aggregate="positive"):
    """Reduce a map on a cross-section stack to one value per cross-section.

    Parameters
    ----------
    map_ : (N, H, W) array_like
        Attribution on one segment's cross-sections.
    aggregate : {"positive", "absolute"}
        Sum of ``max(value, 0)`` or of ``abs(value)`` over each cross-section.

    Returns
    -------
    (N,) float64

    Examples
    --------
    >>> m = np.zeros((3, 2, 2)); m[1, 0, 0] = 2.0; m[2, 1, 1] = -1.0
    >>> profile(m).tolist()
    [0.0, 2.0, 0.0]
    >>> profile(m, aggregate="absolute").tolist()
    [0.0, 2.0, 1.0]
    """
    _check_aggregate(aggregate)
    values = np.asarray(map_, dtype=np.float64)
    if values.ndim != 3:
        raise InputError(f"map: expected an array (N, H, W), got shape {values.shape}")
    values = np.maximum(values, 0.0) if aggregate == "positive" else np.abs(values)
    return values.sum(axis=(1, 2))


def half_peak_extent(profile_, arc_mm, peak_index):
    """Arc interval around a peak where a profile stays at or above half the peak value.

    Parameters
    ----------
    profile_ : (N,) array_like
    arc_mm : (N,) array_like
        Increasing arc positions of the samples, mm.
    peak_index : int
        Sample of the peak (its value must be positive).

    Returns
    -------
    (start_mm, end_mm) : tuple of float
        The half-value crossings, linearly interpolated between samples; the segment's end
        position where the run reaches an end.

    Examples
    --------
    >>> start, end = half_peak_extent([0, 1, 4, 1, 0], [0, 1, 2, 3, 4], 2)
    >>> round(start, 4), round(end, 4)
    (1.3333, 2.6667)
    """
    p = np.asarray(profile_, dtype=np.float64)
    arc = np.asarray(arc_mm, dtype=np.float64)
    half = 0.5 * p[peak_index]
    lo = peak_index
    while lo > 0 and p[lo - 1] >= half:
        lo -= 1
    hi = peak_index
    while hi < p.size - 1 and p[hi + 1] >= half:
        hi += 1

    def crossing(inside, outside):
        # p[inside] >= half > p[outside]; linear interpolation of the crossing.
        t = (p[inside] - half) / (p[inside] - p[outside])
        return float(arc[inside] + t * (arc[outside] - arc[inside]))

    start = crossing(lo, lo - 1) if lo > 0 else float(arc[0])
    end = crossing(hi, hi + 1) if hi < p.size - 1 else float(arc[-1])
    return start, end


def _central_argmax(section, rtol=1e-6):
    """Pixel of the largest value; among (near-)ties the one closest to the centre."""
    best = section.max()
    rows, cols = np.nonzero(section >= best - rtol * abs(best))
    h, w = section.shape
    d2 = (rows - (h - 1) / 2) ** 2 + (cols - (w - 1) / 2) ** 2
    pick = int(np.argmin(d2))  # first (row-major) among equally central ties
    return int(rows[pick]), int(cols[pick])


def find_peak(map_, points_mm, arc_mm, *, image, aggregate="positive"):
    """The peak of a map: cross-section of the largest profile value, pixel of the largest value.

    Parameters
    ----------
    map_ : (N, H, W) array_like
    points_mm : (N, H, W, 3) array_like
        Physical position of every pixel, mm.
    arc_mm : (N,) array_like
    image : SimpleITK.Image
        The CT, for the voxel index.
    aggregate : {"positive", "absolute"}

    Returns
    -------
    Peak or None
        None when the profile is zero everywhere.
    """
    values = np.asarray(map_, dtype=np.float64)
    p = profile(values, aggregate=aggregate)
    if not np.isfinite(p).all():
        raise InputError("map: contains NaN or infinite values; the attribution failed upstream")
    if p.max() <= 0.0:
        return None
    index = int(np.argmax(p))
    section = values[index] if aggregate == "positive" else np.abs(values[index])
    row, col = _central_argmax(section)
    xyz = tuple(float(c) for c in np.asarray(points_mm)[index, row, col])
    voxel = tuple(int(c) for c in image.TransformPhysicalPointToIndex(xyz))
    inside = all(0 <= v < n for v, n in zip(voxel, image.GetSize()))
    return Peak(index=index, row=int(row), col=int(col), arc_mm=float(np.asarray(arc_mm)[index]),
                xyz_mm=xyz, voxel=voxel, value=float(p[index]),
                pixel_value=float(values[index, row, col]), inside_image=inside)


def locate(map_, points_mm, arc_mm, *, image, aggregate="positive"):
    """Profile, peak and half-peak extent of one segment's map.

    Parameters
    ----------
    map_ : (N, H, W) array_like
    points_mm : (N, H, W, 3) array_like, mm
    arc_mm : (N,) array_like, mm
    image : SimpleITK.Image
    aggregate : {"positive", "absolute"}

    Returns
    -------
    Location
    """
    values = np.asarray(map_, dtype=np.float64)
    points = np.asarray(points_mm)
    arc = np.asarray(arc_mm, dtype=np.float64)
    if points.shape != values.shape + (3,) or arc.shape != values.shape[:1]:
        raise InputError(f"map {values.shape}, points_mm {points.shape} and arc_mm {arc.shape} "
                         "do not match; expected (N, H, W), (N, H, W, 3) and (N,)")
    p = profile(values, aggregate=aggregate)
    peak = find_peak(values, points, arc, image=image, aggregate=aggregate)
    extent = None if peak is None else half_peak_extent(p, arc, peak.index)
    return Location(profile=p, arc_mm=arc, aggregate=aggregate, peak=peak, extent_mm=extent)


def overlay(maps, sections, *, like):
    """Splat maps of several segments into one volume with the CT's geometry.

    Parameters
    ----------
    maps : sequence of (N, H, W) arrays
        One map per segment, on that segment's cross-sections.
    sections : sequence of CrossSections
        The stacks the maps live on (their ``points_mm`` place every pixel).
    like : SimpleITK.Image
        The CT; the result has its size, origin, spacing and direction.

    Returns
    -------
    SimpleITK.Image
        float32; voxels no cross-section reaches are 0.
    """
    from .geometry import place

    return place(overlay_box(maps, sections, like=like), like)


def overlay_box(maps, sections, *, like):
    """:func:`overlay` held in the bounding box of the voxels reached (a few MB, not the scan).

    ``explain.geometry.place(box, like)`` gives the volume :func:`overlay` returns, bit for
    bit; writers call it only when the file is written, one method at a time.

    Returns
    -------
    explain.geometry.SplatBox
    """
    from .geometry import splat_box  # the step before this one

    if len(maps) != len(sections):
        raise InputError(f"overlay: {len(maps)} maps for {len(sections)} cross-section stacks")
    return splat_box([np.asarray(m, dtype=np.float32) for m in maps], list(sections), like=like)


def _index_affine(image):
    """Matrix A and offset o with physical = A @ index + o (continuous index)."""
    direction = np.asarray(image.GetDirection(), dtype=np.float64).reshape(3, 3)
    return direction * np.asarray(image.GetSpacing()), np.asarray(image.GetOrigin())


def _dense(points, radius, step):
    """Resample a polyline (and its radii) so that neighbouring samples are <= step apart."""
    seg = np.linalg.norm(np.diff(points, axis=0), axis=1)
    arc = np.concatenate([[0.0], np.cumsum(seg)])
    n = max(2, int(np.ceil(arc[-1] / step)) + 1)
    t = np.linspace(0.0, arc[-1], n)
    dense = np.stack([np.interp(t, arc, points[:, d]) for d in range(3)], axis=1)
    return dense, np.interp(t, arc, radius)


def lumen_label(like, centerline_mm, radius_mm=None, *, label=1):
    """Label image of a vessel's lumen: voxels whose centre lies within the radius of a centerline.

    The tube is cut flat at both ends (no round caps beyond the centerline's ends).

    Parameters
    ----------
    like : SimpleITK.Image
        The CT; the label has its size, origin, spacing and direction.
    centerline_mm : (n, 3) array_like
        Centerline points x, y, z, mm, proximal to distal.
    radius_mm : float or (n,) array_like, optional
        Lumen radius per point, mm (0 where occluded); default :data:`DEFAULT_RADIUS_MM`.
    label : int
        Value of the lumen voxels (1-255); the rest are 0.

    Returns
    -------
    SimpleITK.Image
        uint8.
    """
    from scipy.spatial import cKDTree

    points = np.asarray(centerline_mm, dtype=np.float64)
    if points.ndim != 2 or points.shape[1] != 3 or points.shape[0] < 2:
        raise InputError(f"centerline_mm: expected (n >= 2, 3) points, got shape {points.shape}")
    radius = np.asarray(DEFAULT_RADIUS_MM if radius_mm is None else radius_mm, dtype=np.float64)
    if radius.ndim > 1 or radius.size not in (1, len(points)):
        raise InputError(f"radius_mm: expected one radius per centerline point ({len(points)}) "
                         f"or a single radius, got shape {radius.shape}; de-duplicate per-point "
                         "columns with explain.geometry.centerline.distinct_rows")
    radius = np.broadcast_to(radius.reshape(-1), points.shape[:1])
    if not (np.isfinite(radius).all() and (radius >= 0).all()):
        raise InputError("radius_mm: expected finite radii >= 0 in mm (0 where the lumen is "
                         "occluded)")
    if not 1 <= int(label) <= 255:
        raise InputError(f"label: expected 1-255, got {label}")
    size = np.asarray(like.GetSize())
    matrix, origin = _index_affine(like)
    step = 0.25 * min(like.GetSpacing())
    dense, dense_r = _dense(points, radius, step)

    # Only the box around the tube is examined (index space, padded by the largest radius).
    index = np.linalg.solve(matrix, (dense - origin).T).T
    pad = max(radius.max(), 0.0) / min(like.GetSpacing()) + 1.0
    lo = np.clip(np.floor(index.min(axis=0) - pad), 0, size - 1).astype(int)
    hi = np.clip(np.ceil(index.max(axis=0) + pad), 0, size - 1).astype(int)
    out = np.zeros(tuple(size[::-1]), dtype=np.uint8)
    if (index.max(axis=0) + pad < 0).any() or (index.min(axis=0) - pad > size - 1).any():
        result = sitk.GetImageFromArray(out)
        result.CopyInformation(like)
        return result
    ii, jj, kk = np.meshgrid(*(np.arange(a, b + 1) for a, b in zip(lo, hi)), indexing="ij")
    grid = np.stack([ii.ravel(), jj.ravel(), kk.ravel()], axis=1)
    xyz = grid @ matrix.T + origin
    dist, nearest = cKDTree(dense).query(xyz)
    inside = (dist <= dense_r[nearest]) & (dense_r[nearest] > 0)
    # Flat ends: beyond the first or last point along the end tangent is outside.
    for end, neighbour in ((0, 1), (-1, -2)):
        tangent = dense[end] - dense[neighbour]
        tangent /= np.linalg.norm(tangent)
        at_end = nearest == (end % len(dense))
        beyond = (xyz - dense[end]) @ tangent > 0
        inside &= ~(at_end & beyond)
    hit = grid[inside]
    out[hit[:, 2], hit[:, 1], hit[:, 0]] = int(label)
    result = sitk.GetImageFromArray(out)
    result.CopyInformation(like)
    return result


def profile_per_mm(profile_, arc_mm):
    """A per-cross-section profile as attribution per mm of arc.

    Each cross-section stands for the stretch of arc between the midpoints to its neighbours
    (half a spacing at the ends is taken as a whole one, as :func:`numpy.gradient` does), so its
    sum divided by the local spacing is a density along the vessel, comparable between segments
    of different lengths.

    Parameters
    ----------
    profile_ : (N,) array_like
        Sum of attribution per cross-section (target units).
    arc_mm : (N,) array_like
        Increasing arc positions, mm (N >= 2).

    Returns
    -------
    (N,) float64
        Target units per mm of arc.

    Examples
    --------
    >>> profile_per_mm([1.0, 2.0, 4.0], [0.0, 0.5, 1.0]).tolist()
    [2.0, 4.0, 8.0]
    """
    p = np.asarray(profile_, dtype=np.float64)
    arc = np.asarray(arc_mm, dtype=np.float64)
    if p.shape != arc.shape or p.ndim != 1 or p.size < 2:
        raise InputError(f"profile {p.shape} and arc_mm {arc.shape}: expected two (N >= 2,) arrays")
    step = np.gradient(arc)
    if not (step > 0).all():
        raise InputError("arc_mm: expected strictly increasing arc positions in mm")
    return p / step


def coverage(sections, *, like):
    """Splat weight of cross-section stacks in the CT's geometry (overlays/coverage.nii.gz).

    Parameters
    ----------
    sections : sequence of CrossSections
    like : SimpleITK.Image
        The CT.

    Returns
    -------
    SimpleITK.Image
        float32, the summed trilinear weight of every pixel that reached a voxel; 0 where no
        cross-section reached, so an overlay's 0 there means "not sampled", not "no attribution".
    """
    from .geometry import place

    # the weight alone, placed from the vessels' box: one scan-sized float32 volume
    return place(coverage_box(sections, like=like), like, weight=True)


def coverage_box(sections, *, like):
    """:func:`coverage` held in the vessels' bounding box (its ``weight``), not the scan.

    Returns
    -------
    explain.geometry.SplatBox
    """
    from .geometry import splat_box

    sections = list(sections)
    return splat_box([np.ones(cs.shape, dtype=np.float32) for cs in sections], sections,
                     like=like)


def curve_lumen_label(like, centerline, radius_mm=None, *, label=1):
    """:func:`lumen_label` around a :class:`~explain.geometry.Centerline`'s smooth curve.

    Cross-sections are sampled along the centerline's spline (its ``even_samples``), so the label
    follows the same curve rather than the straight lines between the given points. The curve is
    sampled every quarter of the smallest voxel spacing; the radius given per centerline point is
    interpolated linearly in arc length.

    Parameters
    ----------
    like : SimpleITK.Image
    centerline : explain.geometry.Centerline
    radius_mm : float or (n,) array_like, optional
        One radius per centerline point (mm) or a single one; default :data:`DEFAULT_RADIUS_MM`.
    label : int

    Returns
    -------
    SimpleITK.Image
        uint8.
    """
    arc = np.asarray(centerline.arc_mm, dtype=np.float64)
    radius = np.asarray(DEFAULT_RADIUS_MM if radius_mm is None else radius_mm, dtype=np.float64)
    if radius.ndim > 1 or radius.size not in (1, arc.size):
        raise InputError(f"radius_mm: expected one radius per centerline point ({arc.size}) "
                         f"or a single radius, got shape {radius.shape}")
    n = max(2, int(np.ceil(centerline.length_mm / (0.25 * min(like.GetSpacing())))) + 1)
    points, dense_arc, _ = centerline.even_samples(n)
    dense_r = radius if radius.size == 1 else np.interp(dense_arc, arc, radius.reshape(-1))
    return lumen_label(like, points, np.broadcast_to(dense_r, dense_arc.shape), label=label)
