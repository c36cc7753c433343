"""Profiles, peaks, extents and label volumes on hand-made straight-line geometry.

Outside references: SimpleITK's own index/physical transforms (the voxel of a peak, the voxel
grid of a label image), the full width at half maximum of a Gaussian, 2 sqrt(2 ln 2) sigma
(elementary), and the analytic distance from a point to a line segment (elementary).
"""

import math

import numpy as np
import pytest
import SimpleITK as sitk

from explain.errors import InputError
from explain.mapping import (
    find_peak,
    half_peak_extent,
    locate,
    lumen_label,
    profile,
)


def make_image(size=(30, 34, 40), spacing=(0.5, 0.6, 0.45), origin=(-12.0, 7.5, 30.0),
               rotation_deg=25.0):
    """A CT-like image with a non-identity direction (rotation about z then about x)."""
    image = sitk.Image(list(size), sitk.sitkFloat32)
    image.SetSpacing(spacing)
    image.SetOrigin(origin)
    a = math.radians(rotation_deg)
    rz = np.array([[math.cos(a), -math.sin(a), 0], [math.sin(a), math.cos(a), 0], [0, 0, 1]])
    rx = np.array([[1, 0, 0], [0, math.cos(a / 2), -math.sin(a / 2)],
                   [0, math.sin(a / 2), math.cos(a / 2)]])
    image.SetDirection(tuple((rz @ rx).ravel()))
    return image


def straight_stack(start, direction, *, points, size, pixel_mm, step_mm):
    """Cross-sections of a straight centerline, laid out as docs/architecture.md states."""
    t = np.asarray(direction, float) / np.linalg.norm(direction)
    helper = np.array([1.0, 0, 0]) if abs(t[0]) < 0.9 else np.array([0, 1.0, 0])
    n = np.cross(t, helper)
    n /= np.linalg.norm(n)
    b = np.cross(t, n)
    arc = np.arange(points) * step_mm
    centres = np.asarray(start, float) + arc[:, None] * t
    offs = (np.arange(size) - (size - 1) / 2) * pixel_mm
    rows, cols = np.meshgrid(offs, offs, indexing="ij")
    pts = (centres[:, None, None, :] + cols[None, ..., None] * n + rows[None, ..., None] * b)
    return pts, arc, centres


def test_profile_positive_and_absolute():
    m = np.zeros((4, 3, 3))
    m[1] = 0.5
    m[2, 1, 1] = -3.0
    m[3, 0, 0], m[3, 2, 2] = 2.0, -1.0
    assert profile(m).tolist() == [0.0, 4.5, 0.0, 2.0]
    assert profile(m, aggregate="absolute").tolist() == [0.0, 4.5, 3.0, 3.0]


def test_profile_rejects_bad_options():
    with pytest.raises(InputError, match="aggregate"):
        profile(np.zeros((2, 2, 2)), aggregate="mean")
    with pytest.raises(InputError, match=r"\(N, H, W\)"):
        profile(np.zeros((2, 2)))


@pytest.mark.parametrize("sigma, step", [(3.0, 0.5), (2.0, 0.25), (5.0, 1.0)])
def test_extent_of_gaussian_is_its_fwhm(sigma, step):
    # Full width at half maximum of a Gaussian: 2 sqrt(2 ln 2) sigma (elementary).
    arc = np.arange(0, 60, step)
    centre = 27.3
    p = np.exp(-0.5 * ((arc - centre) / sigma) ** 2)
    start, end = half_peak_extent(p, arc, int(np.argmax(p)))
    fwhm = 2 * math.sqrt(2 * math.log(2)) * sigma
    # Linear interpolation between samples errs by at most a small fraction of a step.
    assert end - start == pytest.approx(fwhm, abs=0.05 * step)
    assert (start + end) / 2 == pytest.approx(centre, abs=0.05 * step)


def test_extent_stays_contiguous_and_stops_at_ends():
    arc = np.arange(8.0)
    p = np.array([5.0, 4.0, 1.0, 0.0, 3.0, 4.9, 0.0, 0.0])
    # The second bump is above half the peak but separated from it: not part of the extent.
    start, end = half_peak_extent(p, arc, 0)
    assert start == 0.0
    assert end == pytest.approx(1 + (4.0 - 2.5) / (4.0 - 1.0))


def test_peak_voxel_matches_simpleitk_index():
    image = make_image()
    # A voxel whose centre is the peak pixel: SimpleITK places it in physical space.
    target = (14, 17, 21)
    centre_mm = np.array(image.TransformIndexToPhysicalPoint(target))
    pts, arc, _ = straight_stack(centre_mm - [0, 0, 6.0], [0.2, 0.1, 1.0], points=24, size=9,
                                 pixel_mm=0.5, step_mm=0.5)
    # Move the stack so that pixel [3, 6] of cross-section 11 sits exactly on that centre.
    pts = pts + (centre_mm - pts[11, 3, 6])
    m = np.zeros((24, 9, 9))
    m[11] = 0.1
    m[11, 3, 6] = 2.0
    m[5, 4, 4] = 1.5          # a sharper but weaker cross-section elsewhere
    peak = find_peak(m, pts, arc, image=image)
    assert (peak.index, peak.row, peak.col) == (11, 3, 6)
    assert peak.voxel == target
    assert peak.xyz_mm == pytest.approx(tuple(centre_mm))
    assert peak.arc_mm == pytest.approx(arc[11])
    assert peak.value == pytest.approx(2.0 + 80 * 0.1)
    assert peak.pixel_value == pytest.approx(2.0)
    assert "voxel (14, 17, 21)" in repr(peak)


def test_locate_without_positive_attribution_has_no_peak():
    image = make_image()
    pts, arc, _ = straight_stack([0, 10, 35], [0, 0, 1], points=6, size=5, pixel_mm=0.5,
                                 step_mm=1.0)
    loc = locate(-np.ones((6, 5, 5)), pts, arc, image=image)
    assert loc.peak is None and loc.extent_mm is None
    assert "no peak" in repr(loc)
    loc = locate(-np.ones((6, 5, 5)), pts, arc, image=image, aggregate="absolute")
    assert loc.peak is not None and loc.extent_mm == (0.0, 5.0)


def test_locate_checks_shapes():
    image = make_image()
    pts, arc, _ = straight_stack([0, 10, 35], [0, 0, 1], points=6, size=5, pixel_mm=0.5,
                                 step_mm=1.0)
    with pytest.raises(InputError, match="do not match"):
        locate(np.ones((5, 5, 5)), pts, arc, image=image)


def _segment_distance(p, a, b):
    """Distance from points p (m, 3) to the segment a-b, and the projection parameter."""
    ab = b - a
    t = ((p - a) @ ab) / (ab @ ab)
    q = a + np.clip(t, 0, 1)[:, None] * ab
    return np.linalg.norm(p - q, axis=1), t


def test_lumen_label_is_the_analytic_cylinder():
    image = make_image(size=(24, 26, 30))
    a = np.array(image.TransformContinuousIndexToPhysicalPoint((5.2, 6.1, 4.0)))
    b = np.array(image.TransformContinuousIndexToPhysicalPoint((17.5, 19.0, 24.3)))
    line = a + np.linspace(0, 1, 7)[:, None] * (b - a)
    label = lumen_label(image, line, 1.3, label=7)
    assert label.GetSize() == image.GetSize()
    assert label.GetOrigin() == image.GetOrigin()
    assert label.GetSpacing() == image.GetSpacing()
    assert label.GetDirection() == image.GetDirection()
    assert label.GetPixelID() == sitk.sitkUInt8
    got = sitk.GetArrayFromImage(label)
    # Reference: every voxel centre placed by SimpleITK, analytic distance to the segment a-b.
    idx = np.array(list(np.ndindex(*image.GetSize())))
    xyz = np.array([image.TransformIndexToPhysicalPoint(tuple(int(c) for c in v)) for v in idx])
    dist, t = _segment_distance(xyz, a, b)
    want = (dist <= 1.3) & (t >= 0) & (t <= 1)
    got_flat = got[idx[:, 2], idx[:, 1], idx[:, 0]] == 7
    # Voxels right on the surface may fall either way (dense resampling of the centerline).
    margin = np.abs(dist - 1.3) < 0.02
    assert np.array_equal(got_flat[~margin], want[~margin])
    assert set(np.unique(got)) == {0, 7}


def test_lumen_label_radius_per_point_and_outside():
    image = make_image(size=(20, 20, 20), rotation_deg=0.0, origin=(0, 0, 0),
                       spacing=(0.5, 0.5, 0.5))
    line = np.array([[5.0, 5.0, 1.0], [5.0, 5.0, 9.0]])
    thin = sitk.GetArrayFromImage(lumen_label(image, line, [0.6, 0.6]))
    taper = sitk.GetArrayFromImage(lumen_label(image, line, [2.0, 0.6]))
    assert thin.sum() < taper.sum()
    # Proximal slices are wider than distal ones when the radius tapers.
    assert taper[3].sum() > taper[17].sum()
    far = np.array([[500.0, 5.0, 1.0], [500.0, 5.0, 9.0]])
    assert sitk.GetArrayFromImage(lumen_label(image, far)).sum() == 0
    with pytest.raises(InputError, match="radius_mm"):
        lumen_label(image, line, -1.0)
    # An occluded stretch (radius 0) holds no lumen voxels; the open part still does.
    occluded = sitk.GetArrayFromImage(lumen_label(image, line, [0.0, 0.0]))
    assert occluded.sum() == 0
    half = sitk.GetArrayFromImage(lumen_label(image, line, [1.5, 0.0]))
    assert half[3].sum() > half[15].sum() > 0 and half[18].sum() == 0
    with pytest.raises(InputError, match="centerline_mm"):
        lumen_label(image, line[:1])


def test_tied_peak_pixels_resolve_toward_the_centerline():
    # An occlusion-like map: one window's drop spread evenly over pixels [0:6, 0:6] of a 9 x 9
    # cross-section; the peak pixel is the tied pixel nearest the centre [4, 4].
    image = make_image()
    pts, arc, _ = straight_stack([0, 10, 35], [0, 0, 1], points=5, size=9, pixel_mm=0.5,
                                 step_mm=1.0)
    m = np.zeros((5, 9, 9))
    m[2, 0:6, 0:6] = 0.7
    peak = find_peak(m, pts, arc, image=image)
    assert (peak.index, peak.row, peak.col) == (2, 4, 4)
    m[2, 0:4, 0:4] = 0.7
    m[2, 4:, :] = 0.0
    m[2, :, 4:] = 0.0
    peak = find_peak(m, pts, arc, image=image)
    assert (peak.row, peak.col) == (3, 3)


def test_peak_outside_the_image_is_flagged():
    image = make_image(size=(10, 10, 10), rotation_deg=0.0, origin=(0, 0, 0),
                       spacing=(1.0, 1.0, 1.0))
    pts, arc, _ = straight_stack([5, 0.2, 2], [0, 0, 1], points=4, size=5, pixel_mm=1.0,
                                 step_mm=1.0)
    m = np.zeros((4, 5, 5))
    m[1, 2, 0] = 1.0          # column 0 lies at y = 0.2 - 2 mm: outside the image
    peak = find_peak(m, pts, arc, image=image)
    assert peak.voxel[1] < 0 and not peak.inside_image
    m[1, 2, 0], m[1, 2, 4] = 0.0, 1.0
    assert find_peak(m, pts, arc, image=image).inside_image


def test_lumen_label_radius_count_mismatch_is_input_error():
    # Issue 15 section 1: a radius array out of step with the points is a clear InputError,
    # never a bare numpy ValueError.
    import numpy as np
    import pytest
    import SimpleITK as sitk
    from explain.errors import InputError
    from explain.mapping import lumen_label
    like = sitk.Image(8, 8, 8, sitk.sitkFloat32)
    points = np.array([[1.0, 1.0, 1.0], [1.0, 1.0, 4.0], [1.0, 1.0, 6.0]])
    with pytest.raises(InputError, match="radius_mm: expected one radius per centerline point"):
        lumen_label(like, points, np.ones(4))
