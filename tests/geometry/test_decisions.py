"""Geometry decisions a reader relies on: readable reprs, the arc tolerance at the ends, notes
that survive resampling, and splat's pairing of maps with stacks (hand-written expectations)."""

import numpy as np
import pytest
import SimpleITK as sitk

from explain.errors import InputError
from explain.geometry import Centerline, sample_cross_sections, splat


def test_reprs_say_shape_length_spacing_and_units():
    line = Centerline([[0, 0, 0], [3, 4, 0], [3, 4, 1e-7], [6, 8, 0]])
    assert repr(line) == "Centerline(3 points, length 10.00 mm, from [0., 0., 0.] to [6., 8., 0.] mm)"
    image = sitk.Image([20, 20, 20], sitk.sitkFloat32) + 40.0
    straight = Centerline([[10.0, 10.0, 2.0], [10.0, 10.0, 17.0]])
    cs = sample_cross_sections(image, straight, points=4, size=5, pixel_mm=1.0, rotation_deg=30)
    assert repr(cs) == ("CrossSections(4 sections x 5x5 px at 1 mm, arc 0.0-15.0 mm, rotation "
                        "30 deg, values float32 HU, 0 px outside (filled -1000 HU))")


def test_dropped_points_are_still_noted_after_resampling():
    line = Centerline([[0, 0, 0], [3, 4, 0], [3, 4, 1e-7], [6, 8, 0]])
    assert line.notes == ("dropped 1 consecutive duplicate point(s) at rows [2]",)
    assert line.resample(5).notes == line.notes


def test_arc_positions_within_1e9_of_the_length_are_clipped_to_the_ends():
    # rounding of an arc computed elsewhere must not fail; a real overshoot must (our rule:
    # a relative 1e-9 of the length, at least 1e-9 mm)
    line = Centerline([[0.0, 0.0, 0.0], [0.0, 0.0, 1000.0]])
    np.testing.assert_allclose(line.position_at(np.array([1000.0 + 5e-7])), [[0, 0, 1000.0]])
    np.testing.assert_allclose(line.position_at(np.array([-5e-7])), [[0, 0, 0.0]], atol=1e-12)
    with pytest.raises(InputError, match="arc_mm"):
        line.position_at(np.array([1000.0 + 1e-5]))
    with pytest.raises(InputError, match="arc_mm"):
        line.tangent_at(np.array([-1e-5]))
    short = Centerline([[0.0, 0.0, 0.0], [0.0, 0.0, 0.5]])
    np.testing.assert_allclose(short.position_at(np.array([0.5 + 5e-10])), [[0, 0, 0.5]])
    with pytest.raises(InputError, match="arc_mm"):
        short.position_at(np.array([0.5 + 5e-9]))


def test_splat_pairs_one_map_with_one_stack_and_names_mismatches():
    image = sitk.Image([12, 12, 12], sitk.sitkFloat32)
    line = Centerline([[6.0, 6.0, 2.0], [6.0, 6.0, 9.0]])
    cs = sample_cross_sections(image, line, points=4, size=3, pixel_mm=1.0)
    ones = np.full((4, 3, 3), 2.0)
    single = sitk.GetArrayFromImage(splat(ones, cs, like=image))
    listed = sitk.GetArrayFromImage(splat([ones], [cs], like=image))
    np.testing.assert_array_equal(single, listed)
    assert set(np.unique(single).tolist()) == {0.0, 2.0}  # a mean of 2.0s is 2.0
    with pytest.raises(InputError, match=r"maps: got 2 map\(s\) for 1 cross-section stack\(s\)"):
        splat([ones, ones], [cs], like=image)
    with pytest.raises(InputError, match=r"cross_sections\[0\]: expected CrossSections, got str"):
        splat([ones], ["not a stack"], like=image)
    with pytest.raises(InputError, match=r"maps\[0\]: expected a numeric array"):
        splat([object()], [cs], like=image)
