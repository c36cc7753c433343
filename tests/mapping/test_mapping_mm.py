"""Attribution per mm of arc, the splat coverage volume, and the culprit label on the spline.

Outside references: elementary closed forms (a uniform density along a vessel; each pixel's
trilinear weights sum to 1, so the total coverage counts the pixels inside the image; the
distance from a point to a circular arc), and SimpleITK's own index/physical transforms.
"""

import math

import numpy as np
import pytest
import SimpleITK as sitk

from explain.errors import InputError
from explain.geometry import Centerline, sample_cross_sections
from explain.mapping import coverage, curve_lumen_label, lumen_label, overlay, profile_per_mm


def test_uniform_density_reads_the_same_on_short_and_long_segments():
    # A density of 0.3 target units per mm of arc, sampled by 32 cross-sections on an 8 mm and a
    # 60 mm segment: per-section sums differ 7.5-fold, the density per mm does not.
    density = 0.3
    out = []
    for length in (8.0, 60.0):
        arc = np.linspace(0.0, length, 32)
        sums = np.full(32, density * length / 31)  # each section holds density x its spacing
        out.append(profile_per_mm(sums, arc))
    np.testing.assert_allclose(out[0], density)
    np.testing.assert_allclose(out[1], density)
    with pytest.raises(InputError, match="increasing"):
        profile_per_mm([1.0, 1.0], [0.0, 0.0])


def _image():
    image = sitk.Image([20, 22, 24], sitk.sitkFloat32) + 50.0
    image.SetSpacing((0.7, 0.6, 0.8))
    image.SetOrigin((-3.0, 2.0, 5.0))
    return image


def test_coverage_counts_the_pixels_inside_and_is_zero_where_nothing_reached():
    image = _image()
    a = np.array(image.TransformContinuousIndexToPhysicalPoint((10.0, 11.0, 3.0)))
    b = np.array(image.TransformContinuousIndexToPhysicalPoint((10.0, 11.0, 19.0)))
    cs = sample_cross_sections(image, Centerline([a, b]), points=9, size=5, pixel_mm=0.5)
    weight = sitk.GetArrayFromImage(coverage([cs], like=image))
    assert weight.dtype == np.float32
    # Every pixel lies inside, and its eight trilinear weights sum to 1.
    assert cs.n_outside == 0
    assert float(weight.sum()) == pytest.approx(cs.values.size, rel=1e-5)
    # Far from the stack nothing was sampled: coverage 0 there, and the overlay's 0 is "unknown".
    assert weight[:, :, :3].max() == 0.0
    mean = sitk.GetArrayFromImage(overlay([np.full(cs.shape, 2.0)], [cs], like=image))
    np.testing.assert_allclose(mean[weight > 0], 2.0, rtol=1e-6)
    assert (mean[weight == 0] == 0).all()


def test_overlapping_segments_average():
    image = _image()
    a = np.array(image.TransformContinuousIndexToPhysicalPoint((10.0, 11.0, 3.0)))
    b = np.array(image.TransformContinuousIndexToPhysicalPoint((10.0, 11.0, 19.0)))
    cs = sample_cross_sections(image, Centerline([a, b]), points=9, size=5, pixel_mm=0.5)
    # The same stack twice, with 1 and 3: every reached voxel holds their mean, 2.
    mean = sitk.GetArrayFromImage(overlay([np.full(cs.shape, 1.0), np.full(cs.shape, 3.0)],
                                          [cs, cs], like=image))
    weight = sitk.GetArrayFromImage(coverage([cs, cs], like=image))
    np.testing.assert_allclose(mean[weight > 0], 2.0, rtol=1e-6)


def test_culprit_label_follows_the_spline_not_the_polyline():
    # Five points on a quarter circle of radius 8 mm; the spline through them stays within a
    # few hundredths of a mm of the circle, while the chords cut inside it by up to
    # 8 (1 - cos(11.25 deg)) = 0.15 mm.
    image = sitk.Image([40, 40, 12], sitk.sitkFloat32)
    image.SetSpacing((0.35, 0.35, 0.7))
    centre = np.array([2.0, 2.0, 3.8])
    angles = np.linspace(0.0, math.pi / 2, 5)
    ring = centre + 8.0 * np.stack([np.cos(angles), np.sin(angles), 0 * angles], axis=1)
    line = Centerline(ring)
    r = 0.9
    curved = sitk.GetArrayFromImage(curve_lumen_label(image, line, r)) > 0
    chords = sitk.GetArrayFromImage(lumen_label(image, ring, r)) > 0
    # Reference: voxel centres placed by SimpleITK, distance to the circular arc (closed form).
    idx = np.array(list(np.ndindex(*image.GetSize())))
    xyz = np.array([image.TransformIndexToPhysicalPoint(tuple(int(c) for c in v)) for v in idx])
    d = xyz - centre
    phi = np.arctan2(d[:, 1], d[:, 0])
    rho = np.hypot(d[:, 0], d[:, 1])
    dist = np.hypot(rho - 8.0, d[:, 2])
    want = (dist <= r) & (phi >= 0) & (phi <= math.pi / 2)
    sure = np.abs(dist - r) > 0.05  # voxels right on the surface may fall either way
    got_curved = curved[idx[:, 2], idx[:, 1], idx[:, 0]]
    got_chords = chords[idx[:, 2], idx[:, 1], idx[:, 0]]
    wrong_curved = int((got_curved != want)[sure].sum())
    wrong_chords = int((got_chords != want)[sure].sum())
    assert wrong_curved == 0
    assert wrong_chords > 0
