"""Regions on a segment's cross-section stack: vessel, patch rim, calcium, segment ends, lesion.

Every region is a boolean array ``(N, H, W)`` on the stack the maps live on, so a map and a
region pair up element by element. Distances in the plane are measured from the stack's centre
pixel, which lies on the centerline (see :mod:`explain.geometry.sampling`).
"""

from __future__ import annotations

import numpy as np
import SimpleITK as sitk

from ..mapping import DEFAULT_RADIUS_MM

__all__ = ["radius_per_section", "vessel_region", "rim_region", "calcium_region", "end_region",
           "lesion_arc_region", "mask_region", "attribution_for", "method_aggregate"]


def method_aggregate(explanation, method):
    """The profile aggregate the explanation used for ``method`` (``settings.profile_aggregate``)."""
    chosen = explanation.settings.get("profile_aggregate", "positive")
    return chosen.get(method, "positive") if isinstance(chosen, dict) else str(chosen)


def attribution_for(map_, aggregate):
    """The non-negative attribution a mass fraction counts: ``max(map, 0)`` or ``|map|``.

    ``aggregate`` is the method's profile aggregate (``"positive"`` or ``"absolute"``), so the
    fractions count what the profiles and peaks count.
    """
    values = np.asarray(map_, dtype=np.float64)
    return np.abs(values) if aggregate == "absolute" else np.maximum(values, 0.0)


def radius_per_section(segment, arc_mm):
    """Lumen radius (mm) at each cross-section, from the centerline's radii by arc length.

    Parameters
    ----------
    segment : explain.case.Segment
        ``radius_mm`` per centerline point, or None.
    arc_mm : (N,) float64, mm

    Returns
    -------
    radius : (N,) float64, mm
        :data:`explain.mapping.DEFAULT_RADIUS_MM` (1.5 mm) everywhere when the case gives none.
    given : bool
        Whether the case gave radii.
    """
    arc = np.asarray(arc_mm, dtype=np.float64)
    radius = getattr(segment, "radius_mm", None)
    if radius is None:
        return np.full(arc.shape, DEFAULT_RADIUS_MM), False
    return np.interp(arc, segment.centerline.arc_mm, np.asarray(radius, dtype=np.float64)), True


def _in_plane_mm(shape, pixel_mm):
    """Distance (mm) of every pixel of an (H, W) cross-section from its centre."""
    h, w = shape
    rows, cols = np.meshgrid(np.arange(h) - (h - 1) / 2, np.arange(w) - (w - 1) / 2,
                             indexing="ij")
    return pixel_mm * np.hypot(rows, cols)


def vessel_region(shape, pixel_mm, radius_mm, *, wall_margin_mm):
    """Pixels within the lumen radius plus ``wall_margin_mm`` of the centerline.

    Parameters
    ----------
    shape : (N, H, W)
    pixel_mm : float
    radius_mm : (N,) float64, mm
    wall_margin_mm : float, mm

    Examples
    --------
    >>> int(vessel_region((1, 5, 5), 1.0, np.array([1.0]), wall_margin_mm=0.0).sum())
    5
    """
    d = _in_plane_mm(shape[1:], pixel_mm)
    return d[None] <= (np.asarray(radius_mm, dtype=np.float64) + wall_margin_mm)[:, None, None]


def rim_region(shape, *, width_px=2):
    """The outer ``width_px`` pixels of every cross-section (the patch border).

    Examples
    --------
    >>> int(rim_region((1, 6, 6), width_px=2).sum())
    32
    """
    n, h, w = shape
    inner = np.zeros((h, w), dtype=bool)
    inner[width_px:h - width_px, width_px:w - width_px] = True
    return np.broadcast_to(~inner, (n, h, w)).copy()


def calcium_region(values_hu, *, calcium_hu):
    """Pixels brighter than ``calcium_hu`` (HU) on the cross-sections ``(N, H, W)``."""
    return np.asarray(values_hu) > calcium_hu


def end_region(shape, arc_mm, length_mm, *, end_mm):
    """Cross-sections within ``end_mm`` of arc of either end of the segment."""
    arc = np.asarray(arc_mm, dtype=np.float64)
    near = (arc <= end_mm) | (arc >= length_mm - end_mm)
    return np.broadcast_to(near[:, None, None], shape).copy()


def lesion_arc_region(shape, pixel_mm, arc_mm, radius_mm, extents):
    """The lesions' arc extents crossed with a disc of the lumen radius.

    Parameters
    ----------
    shape : (N, H, W)
    pixel_mm : float
    arc_mm : (N,) float64, mm
    radius_mm : (N,) float64, mm
    extents : sequence of (start_mm, end_mm)
        Reference lesions on this segment.
    """
    arc = np.asarray(arc_mm, dtype=np.float64)
    along = np.zeros(arc.shape, dtype=bool)
    for start, end in extents:
        along |= (arc >= start) & (arc <= end)
    disc = vessel_region(shape, pixel_mm, radius_mm, wall_margin_mm=0.0)
    return disc & along[:, None, None]


def mask_region(mask, points_mm):
    """A label image sampled onto cross-section pixels, nearest neighbour; True where > 0.

    Parameters
    ----------
    mask : SimpleITK.Image
        The lesion mask on the CT's grid.
    points_mm : (N, H, W, 3) float64, mm
        Physical position of every pixel.

    Returns
    -------
    (N, H, W) bool
        False for pixels outside the image.
    """
    labels = sitk.GetArrayViewFromImage(mask)  # [k, j, i]
    direction = np.asarray(mask.GetDirection(), dtype=np.float64).reshape(3, 3)
    matrix = direction * np.asarray(mask.GetSpacing())
    points = np.asarray(points_mm, dtype=np.float64).reshape(-1, 3)
    index = np.rint(np.linalg.solve(matrix, (points - np.asarray(mask.GetOrigin())).T).T)
    index = index.astype(np.int64)
    size = np.asarray(mask.GetSize())
    inside = np.all((index >= 0) & (index < size), axis=1)
    out = np.zeros(points.shape[0], dtype=bool)
    i, j, k = index[inside].T
    out[inside] = labels[k, j, i] > 0
    return out.reshape(np.shape(points_mm)[:-1])
