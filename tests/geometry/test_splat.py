"""Splatting maps back into the scan.

Outside references: SimpleITK ``PhysicalPointSource`` for voxel positions; the definition of
an adjoint (<S^T m, f> = <m, S f> for the trilinear sampling operator S, elementary linear
algebra); the elementary fact that a weighted mean of a constant is that constant and of a
linear function is its value at the weighted centroid.
"""

import sys
from pathlib import Path

import numpy as np
import pytest
import SimpleITK as sitk
from scipy import ndimage

from explain.errors import InputError
from explain.geometry import Centerline, sample_cross_sections, splat

sys.path.insert(0, str(Path(__file__).parent))
from oblique import (  # noqa: E402
    ORIGIN,
    SIZE,
    SPACING,
    direction_matrix,
    oblique_image,
    oblique_line,
)


def test_constant_map_gives_the_constant_wherever_covered_and_zero_elsewhere():
    image = oblique_image(np.zeros(SIZE[::-1]))
    cs = sample_cross_sections(image, oblique_line(image), points=20, size=9, pixel_mm=0.5)
    out, weight = splat(np.full(cs.shape, 3.25), cs, like=image, return_weight=True)
    values, w = sitk.GetArrayFromImage(out), sitk.GetArrayFromImage(weight)
    covered = w > 0
    assert 0 < covered.sum() < covered.size
    assert np.allclose(values[covered], 3.25, rtol=1e-6)
    assert (values[~covered] == 0.0).all()
    # Total weight is the number of splatted pixels (trilinear weights sum to 1 per pixel).
    assert w.sum() == pytest.approx(cs.values.size, rel=1e-5)


def test_output_takes_the_geometry_of_like():
    image = oblique_image(np.zeros(SIZE[::-1]))
    cs = sample_cross_sections(image, oblique_line(image), points=4, size=3, pixel_mm=0.5)
    out = splat([np.ones(cs.shape)], [cs], like=image)
    assert out.GetPixelID() == sitk.sitkFloat32
    assert out.GetSize() == image.GetSize()
    assert np.allclose(out.GetOrigin(), image.GetOrigin())
    assert np.allclose(out.GetSpacing(), image.GetSpacing())
    assert np.allclose(out.GetDirection(), image.GetDirection())


def test_sample_then_splat_of_a_linear_field_gives_it_back_where_covered():
    # A weighted mean of a linear field is the field at the weighted centroid; where a
    # voxel's whole trilinear support lies inside the densely sampled tube (coverage eroded
    # twice by a 3x3x3 cube), the centroid is the voxel centre up to the pixel-grid density.
    source = sitk.PhysicalPointSource(
        sitk.sitkVectorFloat64, SIZE, ORIGIN, SPACING, direction_matrix().ravel().tolist()
    )
    xyz = sitk.GetArrayFromImage(source)
    gradient = np.array([3.0, -2.0, 1.5])  # HU / mm
    field = xyz @ gradient + 40.0
    image = oblique_image(field)
    cs = sample_cross_sections(image, oblique_line(image), points=60, size=21, pixel_mm=0.3)
    out, weight = splat(cs.values, cs, like=image, return_weight=True)
    interior = ndimage.binary_erosion(
        sitk.GetArrayFromImage(weight) > 0, structure=np.ones((3, 3, 3)), iterations=2
    )
    assert interior.sum() > 50
    error = np.abs(sitk.GetArrayFromImage(out) - field)[interior]
    assert error.max() < 0.05  # HU, field spans ~ +-100 HU; ~0.01 mm of centroid offset


def test_unnormalised_splat_is_the_adjoint_of_sampling():
    # <S^T m, f> = <m, S f>: weight * mean is the plain scatter-add S^T m.
    rng = np.random.default_rng(2026)  # seed recorded
    f = rng.normal(size=SIZE[::-1]).astype(np.float32)
    image = oblique_image(f)
    stacks = [
        sample_cross_sections(image, oblique_line(image), points=15, size=7, pixel_mm=0.6),
        sample_cross_sections(image, oblique_line(image, length=14.0), points=9, size=7,
                              pixel_mm=0.9, rotation_deg=45.0),
    ]
    maps = [rng.normal(size=cs.shape) for cs in stacks]
    out, weight = splat(maps, stacks, like=image, return_weight=True)
    scattered = sitk.GetArrayFromImage(out).astype(np.float64) * sitk.GetArrayFromImage(weight)
    lhs = float((scattered * f).sum())
    rhs = float(sum((m * cs.values).sum() for m, cs in zip(maps, stacks)))
    assert lhs == pytest.approx(rhs, rel=1e-5, abs=1e-3)


def test_overlapping_stacks_average():
    image = sitk.Image([16, 16, 16], sitk.sitkFloat32)
    line = Centerline([[8.0, 8.0, 3.0], [8.0, 8.0, 12.0]])
    cs = sample_cross_sections(image, line, points=10, size=5, pixel_mm=1.0)
    out = splat([np.full(cs.shape, 2.0), np.full(cs.shape, 6.0)], [cs, cs], like=image)
    values = sitk.GetArrayFromImage(out)
    assert np.allclose(values[values != 0], 4.0, rtol=1e-6)


def test_pixels_outside_like_are_skipped():
    image = sitk.Image([10, 10, 10], sitk.sitkFloat32)
    line = Centerline([[1.2, 5.0, 2.0], [1.2, 5.0, 20.0]])  # leaves through z = 9
    cs = sample_cross_sections(image, line, points=10, size=5, pixel_mm=1.0)
    assert cs.n_outside > 0
    out, weight = splat(np.full(cs.shape, 1.5), cs, like=image, return_weight=True)
    w = sitk.GetArrayFromImage(weight)
    assert w.sum() == pytest.approx(cs.values.size - cs.n_outside, rel=1e-5)
    assert np.allclose(sitk.GetArrayFromImage(out)[w > 0], 1.5)


@pytest.mark.parametrize(
    "maps, stacks, like, words",
    [
        ("wrong", "cs", "image", "maps[0]: expected shape"),
        ("short", "cs", "image", "maps[0]: expected shape"),
        ("two", "cs", "image", "got 2 map(s) for 1 cross-section"),
        ("nan", "cs", "image", "NaN or infinite"),
        ("ok", "array", "image", "cross_sections[0]: expected CrossSections"),
        ("ok", "cs", "array", "like: expected a SimpleITK image"),
    ],
)
def test_bad_inputs_raise_input_error(maps, stacks, like, words):
    image = sitk.Image([10, 10, 10], sitk.sitkFloat32)
    cs = sample_cross_sections(image, Centerline([[5.0, 5, 2], [5, 5, 7]]), points=4, size=3,
                               pixel_mm=1.0)
    good = np.ones(cs.shape)
    chosen_maps = {
        "wrong": np.ones((4, 3, 4)),
        "short": [np.ones((3, 3, 3))],
        "two": [good, good],
        "nan": np.where(good > 0, np.nan, 0.0),
        "ok": [good],
    }[maps]
    chosen_stacks = {"cs": cs, "array": [np.ones(cs.shape)]}[stacks]
    chosen_like = {"image": image, "array": np.zeros((10, 10, 10))}[like]
    with pytest.raises(InputError, match=words.replace("(", r"\(").replace(")", r"\)")
                       .replace("[", r"\[").replace("]", r"\]")):
        splat(chosen_maps, chosen_stacks, like=chosen_like)


def test_case_sections_and_a_stacked_map_are_accepted():
    from types import SimpleNamespace

    from explain.geometry import sample_case

    image = sitk.Image([16, 16, 16], sitk.sitkFloat32)
    segments = (SimpleNamespace(id=2, centerline=Centerline([[4.0, 8, 2], [4, 8, 12]])),
                SimpleNamespace(id=1, centerline=Centerline([[11.0, 8, 2], [11, 8, 12]])))
    # 11 sections 1 mm apart on voxel centres: every voxel of each 3 x 3 x 11 block is hit.
    sections = sample_case(SimpleNamespace(image=image, segments=segments), points=11, size=3,
                           pixel_mm=1.0)
    maps = np.stack([np.full((11, 3, 3), 1.0), np.full((11, 3, 3), 5.0)])  # segments 1, 2
    values = sitk.GetArrayFromImage(splat(maps, sections, like=image))
    assert np.allclose(values[2:13, 7:10, 3:6], 5.0)  # segment 2 at x = 4 (array [k, j, i])
    assert np.allclose(values[2:13, 7:10, 10:13], 1.0)  # segment 1 at x = 11
