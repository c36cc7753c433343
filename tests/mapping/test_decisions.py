"""Tests that pin the peak, extent and aggregate rules of explain.mapping, and the overlay.

Independent references: a brute-force full width at half maximum of the piecewise-linear profile
on a 1e-4 mm grid (elementary), hand-computed profiles, and SimpleITK's own index transform.
"""

import importlib.util
from pathlib import Path

import numpy as np
import pytest
import SimpleITK as sitk

from explain.errors import InputError
from explain.mapping import find_peak, half_peak_extent, locate, overlay, profile

_spec = importlib.util.spec_from_file_location(
    "mapping_helpers", Path(__file__).with_name("test_mapping.py"))
_m = importlib.util.module_from_spec(_spec)
_spec.loader.exec_module(_m)


def _brute_force_extent(p, arc, peak):
    """The run of the linear interpolant of ``p`` at or above p[peak] / 2, around arc[peak]."""
    grid = np.arange(arc[0], arc[-1] + 5e-5, 1e-4)
    values = np.interp(grid, arc, p)
    inside = values >= 0.5 * p[peak] - 1e-12
    centre = int(np.argmin(np.abs(grid - arc[peak])))
    lo = centre
    while lo > 0 and inside[lo - 1]:
        lo -= 1
    hi = centre
    while hi < grid.size - 1 and inside[hi + 1]:
        hi += 1
    return grid[lo], grid[hi]


ARC = np.array([0.0, 0.7, 1.9, 2.4, 3.8, 4.1, 5.6, 6.0, 7.5])


@pytest.mark.parametrize("p", [
    [0, 1, 3, 3, 4, 3, 3, 1, 0],      # a plateau above half, crossings on both sides
    [0, 3, 0, 3, 4, 3, 0, 3, 0],      # bumps beyond a dip do not join the run
    [3, 3, 3, 3, 4, 0, 0, 0, 0],      # the run reaches the start: it stops at arc[0]
    [2, 2, 2, 3, 4, 1, 0, 0, 0],      # values exactly at half count as inside
    [0, 0, 0, 0, 0, 1, 1, 4, 0],      # the peak next to the last sample
    [0, 4, 1, 0, 0, 0, 0, 0, 0],      # the peak next to the first sample
    [0, 0, 0, 0, 0, 0, 1, 3, 4],      # the peak at the end
    [3, 4, 0, 0, 0, 0, 0, 0, 3],      # the run stops at the start, not round to the end
    [0, 0, 0, 0, 1, 3, 4, 2, 2],      # exactly half up to the end: the run reaches it
])
def test_half_peak_extent_is_the_brute_force_fwhm(p):
    p = np.asarray(p, float)
    peak = int(np.argmax(p))
    start, end = half_peak_extent(p, ARC, peak)
    want = _brute_force_extent(p, ARC, peak)
    assert start == pytest.approx(want[0], abs=2e-4)
    assert end == pytest.approx(want[1], abs=2e-4)


def test_half_peak_extent_by_hand():
    # [2, 2, 4, 1, 0] on arcs 0..4: indices 0-2 are >= 2, so the run starts at arc 0; the end
    # crossing lies between 2 (4) and 3 (1): 2 + (4 - 2) / (4 - 1) = 2.6667 mm.
    start, end = half_peak_extent([2, 2, 4, 1, 0], [0, 1, 2, 3, 4], 2)
    assert start == 0.0 and end == pytest.approx(2 + 2 / 3)
    # [0, 4, 4, 0, 0]: peak 1; crossings at 0.5 and 2.5
    start, end = half_peak_extent([0, 4, 4, 0, 0], [0, 1, 2, 3, 4], 1)
    assert (start, end) == pytest.approx((0.5, 2.5))


def _stack(points=6, size=5):
    return _m.straight_stack([0, 10, 35], [0, 0, 1], points=points, size=size, pixel_mm=0.5,
                             step_mm=1.0)


def test_peak_is_the_first_of_tied_profile_maxima():
    image = _m.make_image()
    pts, arc, _ = _stack()
    m = np.zeros((6, 5, 5))
    m[1, 2, 2] = 2.0
    m[4, 2, 2] = 2.0          # a later cross-section with the same profile value
    m[3, 0, 0] = 1.9
    peak = find_peak(m, pts, arc, image=image)
    assert peak.index == 1 and peak.arc_mm == 1.0 and peak.value == 2.0


def test_peak_pixel_for_the_absolute_aggregate_is_the_largest_magnitude():
    image = _m.make_image()
    pts, arc, _ = _stack()
    m = np.zeros((6, 5, 5))
    m[3, 0, 1] = -5.0
    m[3, 2, 2] = 1.0
    peak = find_peak(m, pts, arc, image=image, aggregate="absolute")
    assert (peak.index, peak.row, peak.col) == (3, 0, 1)
    assert peak.value == 6.0 and peak.pixel_value == -5.0
    positive = find_peak(m, pts, arc, image=image)  # the positive part ignores the -5
    assert (positive.index, positive.row, positive.col) == (3, 2, 2) and positive.value == 1.0


def test_peak_pixel_near_ties_are_relative_1e6():
    image = _m.make_image()
    pts, arc, _ = _stack(size=7)
    m = np.zeros((6, 7, 7))
    m[2, 0, 0] = 1000.0
    m[2, 3, 2] = 1000.0 * (1 - 5e-7)  # within a relative 1e-6: tied, and nearer the centre
    peak = find_peak(m, pts, arc, image=image)
    assert (peak.row, peak.col) == (3, 2)
    m[2, 3, 2] = 1000.0 * (1 - 2e-6)  # outside the tolerance: the true maximum wins
    peak = find_peak(m, pts, arc, image=image)
    assert (peak.row, peak.col) == (0, 0)


def test_no_positive_attribution_means_no_peak_but_absolute_has_one():
    image = _m.make_image()
    pts, arc, _ = _stack()
    m = -np.ones((6, 5, 5))
    assert find_peak(m, pts, arc, image=image) is None
    assert find_peak(m, pts, arc, image=image, aggregate="absolute").index == 0
    assert find_peak(np.zeros((6, 5, 5)), pts, arc, image=image, aggregate="absolute") is None


def test_inside_image_at_the_first_and_last_voxel():
    # SimpleITK TransformPhysicalPointToIndex gives the voxel; 0 and size - 1 are inside
    image = _m.make_image(size=(10, 10, 10), rotation_deg=0.0, origin=(0, 0, 0),
                          spacing=(1.0, 1.0, 1.0))
    for z, inside in ((0.0, True), (9.0, True), (10.0, False), (-1.0, False)):
        pts, arc, _ = _m.straight_stack([4, 4, z], [0, 0, 1], points=1, size=1, pixel_mm=1.0,
                                        step_mm=1.0)
        peak = find_peak(np.ones((1, 1, 1)), pts, arc, image=image)
        assert peak.voxel[2] == int(round(z)) and peak.inside_image is inside


def test_profile_is_float64_sums_per_cross_section():
    m = np.full((2, 100, 100), 0.1, dtype=np.float32)
    m[1] = -0.1
    p = profile(m)
    assert p.dtype == np.float64
    # by hand, in float64: 10000 x float32(0.1)
    np.testing.assert_allclose(p, [10000 * float(np.float32(0.1)), 0.0], rtol=1e-12)
    assert profile(m, aggregate="absolute").tolist() == pytest.approx([1000.0, 1000.0], rel=1e-6)


def test_locate_records_its_inputs_and_checks_each_shape():
    image = _m.make_image()
    pts, arc, _ = _stack()
    m = np.zeros((6, 5, 5))
    m[2, 1, 1] = -3.0
    loc = locate(m, pts, arc, image=image, aggregate="absolute")
    assert loc.aggregate == "absolute" and loc.arc_mm.tolist() == arc.tolist()
    assert loc.profile.tolist() == [0, 0, 3.0, 0, 0, 0]
    assert loc.extent_mm == pytest.approx((1.5, 2.5))
    assert repr(loc) == "Location(6 cross-sections, absolute, peak at 2.0 mm, extent 1.5-2.5 mm)"
    none = locate(m, pts, arc, image=image)  # no positive attribution
    assert none.peak is None and none.extent_mm is None
    assert repr(none) == "Location(6 cross-sections, positive, no peak)"
    shapes = r"do not match; expected \(N, H, W\), \(N, H, W, 3\) and \(N,\)"
    with pytest.raises(InputError, match="arc_mm .*" + shapes):
        locate(m, pts, arc[:-1], image=image)
    with pytest.raises(InputError, match="points_mm .*" + shapes):
        locate(m, pts[:, :-1], arc, image=image)
    with pytest.raises(InputError, match="NaN or infinite values"):
        locate(np.full((6, 5, 5), np.nan), pts, arc, image=image)
    with pytest.raises(InputError, match="aggregate: expected one of positive, absolute, got 'sum'"):
        locate(m, pts, arc, image=image, aggregate="sum")


def test_overlay_of_a_constant_map_is_that_constant_where_reached():
    # Where every map is 2.5, any average of the maps is 2.5 (elementary); the rest is 0
    from explain.geometry import Centerline, sample_cross_sections

    image = _m.make_image(size=(20, 20, 20), rotation_deg=0.0, origin=(0, 0, 0),
                          spacing=(0.5, 0.5, 0.5))
    line = Centerline(np.array([[5.0, 5.0, 1.0], [5.0, 5.0, 9.0]]))
    cs = sample_cross_sections(image, line, points=8, size=5, pixel_mm=0.5)
    vol = overlay([np.full((8, 5, 5), 2.5)], [cs], like=image)
    assert vol.GetPixelID() == sitk.sitkFloat32 and vol.GetSize() == image.GetSize()
    assert vol.GetOrigin() == image.GetOrigin() and vol.GetDirection() == image.GetDirection()
    values = sitk.GetArrayFromImage(vol)
    assert set(np.unique(values).tolist()) == {0.0, 2.5}
    with pytest.raises(InputError, match="2 maps for 1"):
        overlay([np.ones((8, 5, 5))] * 2, [cs], like=image)


def _analytic_tube(image, a, b, radius):
    """Voxel centres (SimpleITK TransformIndexToPhysicalPoint) within ``radius`` of segment a-b."""
    idx = np.array(list(np.ndindex(*image.GetSize())))
    xyz = np.array([image.TransformIndexToPhysicalPoint(tuple(int(c) for c in v)) for v in idx])
    dist, t = _m._segment_distance(xyz, a, b)
    want = np.zeros(tuple(image.GetSize()[::-1]), dtype=bool)
    want[idx[:, 2], idx[:, 1], idx[:, 0]] = (dist <= radius) & (t >= 0) & (t <= 1)
    margin = np.zeros_like(want)
    margin[idx[:, 2], idx[:, 1], idx[:, 0]] = np.abs(dist - radius) < 0.02
    return want, margin


@pytest.mark.parametrize("a, b", [
    ((-3.0, 3.0, 2.8), (4.0, 3.0, 2.8)),     # enters through the low x face
    ((2.0, 3.0, 4.0), (2.0, 3.0, 11.0)),     # leaves through the high z face
    ((2.0, 1.0, 0.5), (2.0, 6.0, 0.5)),      # along y, half of it below z = 0
])
def test_lumen_label_of_an_axis_aligned_tube_crossing_the_image_border(a, b):
    # anisotropic voxels and a tube cut by the image's faces: the label is the analytic
    # cylinder's voxels inside the image, no more (nothing wraps round to the far side)
    image = _m.make_image(size=(10, 12, 14), rotation_deg=0.0, origin=(0.0, 0.0, 0.0),
                          spacing=(0.5, 0.6, 0.7))
    a, b = np.asarray(a), np.asarray(b)
    line = a + np.linspace(0, 1, 5)[:, None] * (b - a)
    from explain.mapping import lumen_label

    got = sitk.GetArrayFromImage(lumen_label(image, line, 1.3)) == 1
    want, margin = _analytic_tube(image, a, b, 1.3)
    assert want.any()
    assert np.array_equal(got[~margin], want[~margin])


def test_lumen_label_value_bounds_and_messages():
    from explain.mapping import lumen_label

    image = _m.make_image(size=(10, 10, 10), rotation_deg=0.0, origin=(0.0, 0.0, 0.0),
                          spacing=(0.5, 0.5, 0.5))
    line = np.array([[2.5, 2.5, 0.5], [2.5, 2.5, 4.0]])
    assert set(np.unique(sitk.GetArrayFromImage(lumen_label(image, line, 1.0, label=255)))) == {0, 255}
    for bad in (0, 256):
        with pytest.raises(InputError, match=f"label: expected 1-255, got {bad}"):
            lumen_label(image, line, 1.0, label=bad)
    with pytest.raises(InputError, match=r"radius_mm: expected finite radii >= 0 in mm"):
        lumen_label(image, line, [1.0, float("nan")])
    with pytest.raises(InputError, match=r"centerline_mm: expected \(n >= 2, 3\) points"):
        lumen_label(image, line[:, :2])
