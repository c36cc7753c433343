"""An obliquely oriented test grid shared by the sampling and splat tests.

Non-identity direction (rotation times an axis flip), anisotropic spacing, non-zero origin.
"""

import numpy as np
import SimpleITK as sitk

from explain.geometry import Centerline

SIZE = (40, 36, 30)  # i, j, k
SPACING = (0.7, 0.9, 1.3)
ORIGIN = (-12.5, 30.2, 101.0)


def direction_matrix():
    # A generic rotation times an axis flip: non-identity, not axis-aligned, determinant -1
    # (scanner directions are often improper in LPS).
    a, b, c = 0.4, -0.7, 1.1
    rx = np.array([[1, 0, 0], [0, np.cos(a), -np.sin(a)], [0, np.sin(a), np.cos(a)]])
    ry = np.array([[np.cos(b), 0, np.sin(b)], [0, 1, 0], [-np.sin(b), 0, np.cos(b)]])
    rz = np.array([[np.cos(c), -np.sin(c), 0], [np.sin(c), np.cos(c), 0], [0, 0, 1]])
    return rz @ ry @ rx @ np.diag([1.0, -1.0, 1.0])


def oblique_image(array):
    image = sitk.GetImageFromArray(np.asarray(array, dtype=np.float32))
    image.SetSpacing(SPACING)
    image.SetOrigin(ORIGIN)
    image.SetDirection(direction_matrix().ravel().tolist())
    return image


def oblique_line(image, *, length=10.0):
    centre = np.array(image.TransformContinuousIndexToPhysicalPoint((19.5, 17.0, 14.5)))
    direction = np.array([0.3, -0.5, 0.8]) / np.linalg.norm([0.3, -0.5, 0.8])
    bend = np.array([0.8, 0.3, -0.1])
    s = np.linspace(-0.5, 0.5, 9)[:, None]
    return Centerline(centre + length * s * direction + 2.0 * s**2 * bend)


def sitk_index(image, points):
    """Continuous index (i, j, k) of each point, by SimpleITK."""
    flat = np.asarray(points, dtype=np.float64).reshape(-1, 3)
    return np.array([image.TransformPhysicalPointToContinuousIndex(p.tolist()) for p in flat])
