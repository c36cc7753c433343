"""Measurements taken from a phantom's volume alone, with SimpleITK's own geometry.

Voxel positions come from ``Image.TransformIndexToPhysicalPoint`` (SimpleITK, the outside
reference for the LPS physical space), never from the phantom's internal grid.
"""

import math

import numpy as np
import SimpleITK as sitk


def slab(image, centerline, arc_mm, *, radius_mm, half_mm):
    """Voxels of a slab perpendicular to a centerline.

    Returns
    -------
    values : (m,) float HU
    rho : (m,) float, mm, distance from the centerline axis
    offset : (m, 3) float, mm, the in-plane offset vector from the axis
    """
    centre = centerline.position_at(arc_mm)
    tangent = centerline.tangent_at(arc_mm)
    index = np.array(image.TransformPhysicalPointToIndex(tuple(float(v) for v in centre)))
    n = int(math.ceil((radius_mm + half_mm) / min(image.GetSpacing()))) + 1
    lo = np.maximum(index - n, 0)
    hi = np.minimum(index + n + 1, image.GetSize())
    array = sitk.GetArrayViewFromImage(image)
    values, points = [], []
    for k in range(lo[2], hi[2]):
        for j in range(lo[1], hi[1]):
            for i in range(lo[0], hi[0]):
                points.append(image.TransformIndexToPhysicalPoint((i, j, k)))
                values.append(array[k, j, i])
    points = np.asarray(points) - centre
    values = np.asarray(values, dtype=np.float64)
    along = points @ tangent
    offset = points - along[:, None] * tangent
    rho = np.linalg.norm(offset, axis=1)
    keep = (np.abs(along) <= half_mm) & (rho <= radius_mm)
    return values[keep], rho[keep], offset[keep]


def lumen_area(values, rho, radius_mm, threshold_hu):
    """Area (mm2) above ``threshold_hu`` within ``radius_mm`` of the axis: the share of slab
    voxels above it times the disc area (this cancels the slab's voxel-count thickness)."""
    inside = rho <= radius_mm
    return float(np.mean(values[inside] >= threshold_hu) * math.pi * radius_mm ** 2)


def half_max_threshold(values, rho, *, core_mm, ring_mm):
    """Midway between the median of the core (rho <= core_mm) and of a ring (ring_mm = (a, b)):
    the half-maximum rule for the edge of a blurred step (common practice, no source)."""
    core = np.median(values[rho <= core_mm])
    ring = np.median(values[(rho >= ring_mm[0]) & (rho <= ring_mm[1])])
    return 0.5 * (core + ring), core, ring
