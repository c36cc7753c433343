"""Cross-section sampling checked against SimpleITK and scipy.

Outside references: SimpleITK's own index <-> physical maps
(``TransformPhysicalPointToContinuousIndex``, ``PhysicalPointSource``) and linear resampling
(``sitk.Resample`` with ``sitkLinear``); ``scipy.ndimage.map_coordinates(order=1)``; and the
elementary fact that trilinear interpolation reproduces a linear function exactly.
NumPy arrays from SimpleITK are indexed [k, j, i], so map_coordinates gets (k, j, i).
"""

import sys
from pathlib import Path

import numpy as np
import pytest
import SimpleITK as sitk
from scipy import ndimage

from explain.errors import InputError
from explain.geometry import (
    Centerline,
    CrossSections,
    rotation_minimizing_frames,
    sample_cross_sections,
)

sys.path.insert(0, str(Path(__file__).parent))
from oblique import (  # noqa: E402
    ORIGIN,
    SIZE,
    SPACING,
    direction_matrix,
    oblique_image,
    oblique_line,
    sitk_index,
)


def test_linear_field_of_physical_position_is_reproduced_exactly():
    # Elementary: trilinear interpolation is exact for linear functions; positions of voxels
    # come from SimpleITK's PhysicalPointSource, not from our own index map.
    source = sitk.PhysicalPointSource(
        sitk.sitkVectorFloat64, SIZE, ORIGIN, SPACING, direction_matrix().ravel().tolist()
    )
    xyz = sitk.GetArrayFromImage(source)  # (k, j, i, 3) mm
    gradient, offset = np.array([3.0, -2.0, 1.5]), 40.0
    image = oblique_image(xyz @ gradient + offset)
    cs = sample_cross_sections(image, oblique_line(image), points=12, size=9, pixel_mm=0.8)
    assert cs.n_outside == 0
    expected = cs.points_mm @ gradient + offset
    assert np.abs(cs.values - expected).max() < 1e-3  # float32 voxels, values ~ 1e2 HU


def test_index_map_agrees_with_simpleitk_continuous_index():
    # A field equal to the voxel index along each axis samples to the continuous index itself;
    # compare with SimpleITK's TransformPhysicalPointToContinuousIndex at every pixel.
    k, j, i = np.meshgrid(*(np.arange(n, dtype=np.float64) for n in SIZE[::-1]), indexing="ij")
    line = None
    got = []
    for field in (i, j, k):
        image = oblique_image(field)
        line = line or oblique_line(image)
        got.append(sample_cross_sections(image, line, points=6, size=7, pixel_mm=0.9))
    expected = sitk_index(image, got[0].points_mm).reshape(6, 7, 7, 3)
    for axis in range(3):
        assert np.abs(got[axis].values - expected[..., axis]).max() < 2e-5
    # And back: SimpleITK's TransformContinuousIndexToPhysicalPoint of the sampled indices
    # gives each pixel's points_mm (p = origin + D diag(spacing) idx).
    ours = np.stack([g.values for g in got], axis=-1).reshape(-1, 3).astype(np.float64)
    back = np.array([image.TransformContinuousIndexToPhysicalPoint(c.tolist()) for c in ours])
    assert np.abs(back - got[0].points_mm.reshape(-1, 3)).max() < 1e-4  # float32 indices


def test_random_field_agrees_with_scipy_map_coordinates_order_1():
    # scipy.ndimage.map_coordinates(order=1) on the array [k, j, i] at SimpleITK's indices.
    rng = np.random.default_rng(7)  # seed recorded
    array = rng.normal(0.0, 200.0, size=SIZE[::-1]).astype(np.float32)
    image = oblique_image(array)
    cs = sample_cross_sections(
        image, oblique_line(image), points=10, size=11, pixel_mm=0.6, rotation_deg=33.0
    )
    assert cs.n_outside == 0
    ijk = sitk_index(image, cs.points_mm)
    reference = ndimage.map_coordinates(array, ijk[:, ::-1].T, order=1)
    assert np.abs(cs.values.reshape(-1) - reference).max() < 1e-3


def test_sections_agree_with_simpleitk_linear_resample():
    # sitk.Resample with a linear interpolator onto a grid spanned by the section's axes.
    rng = np.random.default_rng(11)  # seed recorded
    array = ndimage.gaussian_filter(rng.normal(0.0, 300.0, size=SIZE[::-1]), 1.0)
    image = oblique_image(array)
    size, pixel = 9, 0.7
    cs = sample_cross_sections(image, oblique_line(image), points=5, size=size, pixel_mm=pixel,
                               rotation_deg=-20.0)
    r = np.radians(-20.0)
    for n in range(5):
        t, normal, binormal = cs.frames[n]
        u = np.cos(r) * normal + np.sin(r) * binormal
        v = -np.sin(r) * normal + np.cos(r) * binormal
        reference = sitk.Image([size, size, 1], sitk.sitkFloat32)
        reference.SetOrigin(cs.points_mm[n, 0, 0].tolist())
        reference.SetSpacing((pixel, pixel, 1.0))
        reference.SetDirection(np.column_stack([u, v, t]).ravel().tolist())
        resampled = sitk.Resample(image, reference, sitk.Transform(), sitk.sitkLinear, -1000.0)
        assert np.abs(cs.values[n] - sitk.GetArrayFromImage(resampled)[0]).max() < 1e-3


def _parallel_transport(line, normal0, at_mm, steps=4000):
    """Normals at ``at_mm`` carried from ``normal0`` by minimal rotations between tangents."""
    arc = np.linspace(0.0, line.length_mm, steps + 1)
    tangents = line.tangent_at(arc)
    tangents = tangents / np.linalg.norm(tangents, axis=1, keepdims=True)
    normals = np.empty_like(tangents)
    normals[0] = normal0
    for i in range(steps):
        a, b = tangents[i], tangents[i + 1]
        axis, cos = np.cross(a, b), float(a @ b)
        n = normals[i]
        # Rodrigues' rotation by the angle between a and b about a x b
        normals[i + 1] = n * cos + np.cross(axis, n) + axis * (axis @ n) / (1.0 + cos)
        normals[i + 1] -= (normals[i + 1] @ b) * b
        normals[i + 1] /= np.linalg.norm(normals[i + 1])
    return np.stack([np.array([np.interp(s, arc, normals[:, d]) for d in range(3)])
                     for s in at_mm])


def test_pixels_follow_the_architecture_convention():
    # docs/architecture.md: pixel [row, col] = centre + (col-(W-1)/2) p u + (row-(H-1)/2) p v.
    image = oblique_image(np.zeros(SIZE[::-1]))
    line = oblique_line(image)
    cs = sample_cross_sections(image, line, points=7, size=5, pixel_mm=0.5, rotation_deg=30.0)
    # Centres evenly spaced along the given centerline's smooth curve, frames rotation-
    # minimizing on its tangents there.
    assert np.allclose(cs.arc_mm, np.linspace(0.0, line.length_mm, 7), rtol=0, atol=1e-12)
    assert np.allclose(cs.points_mm[:, 2, 2], line.position_at(cs.arc_mm), atol=1e-9)
    assert np.allclose(cs.points_mm[:, 2, 2], line.resample(7).points_mm, atol=1e-12)
    assert np.allclose(cs.frames[:, 0], line.tangent_at(cs.arc_mm), atol=1e-9)
    assert np.allclose(
        cs.frames,
        rotation_minimizing_frames(cs.points_mm[:, 2, 2], line.tangent_at(cs.arc_mm)),
        atol=1e-9,
    )
    # Independently of that function: parallel transport (Bishop 1975, "There is more than one
    # way to frame a curve") of the first normal along 4000 steps of the curve, each step
    # turning it by the smallest rotation that takes one tangent to the next (Rodrigues).
    np.testing.assert_allclose(cs.frames[:, 1], _parallel_transport(line, cs.frames[0, 1],
                                                                    cs.arc_mm), atol=1e-6)
    r = np.radians(30.0)
    u = np.cos(r) * cs.frames[:, 1] + np.sin(r) * cs.frames[:, 2]
    v = -np.sin(r) * cs.frames[:, 1] + np.cos(r) * cs.frames[:, 2]
    assert np.allclose(cs.points_mm[:, 2, 4] - cs.points_mm[:, 2, 2], 2 * 0.5 * u)
    assert np.allclose(cs.points_mm[:, 0, 2] - cs.points_mm[:, 2, 2], -2 * 0.5 * v)
    # Each section lies in the plane perpendicular to the tangent.
    offsets = cs.points_mm - cs.points_mm[:, 2:3, 2:3]
    assert np.abs(np.einsum("nhwc,nc->nhw", offsets, cs.frames[:, 0])).max() < 1e-12


def test_rotation_90_is_a_quarter_turn_of_rotation_0():
    # Follows from the pixel convention (no outside source): with r = 90 deg, u = binormal and
    # v = -normal, so values90[n, row, col] = values0[n, col, W-1-row] = np.rot90(values0).
    rng = np.random.default_rng(3)  # seed recorded
    image = oblique_image(rng.normal(size=SIZE[::-1]))
    line = oblique_line(image)
    cs0 = sample_cross_sections(image, line, points=6, size=8, pixel_mm=0.7)
    cs90 = sample_cross_sections(image, line, points=6, size=8, pixel_mm=0.7, rotation_deg=90.0)
    assert np.allclose(cs90.values, np.rot90(cs0.values, k=1, axes=(1, 2)), atol=1e-5)
    assert np.allclose(cs90.points_mm, np.rot90(cs0.points_mm, k=1, axes=(1, 2)), atol=1e-12)
    cs360 = sample_cross_sections(image, line, points=6, size=8, pixel_mm=0.7, rotation_deg=360.0)
    assert np.allclose(cs360.values, cs0.values, atol=1e-5)


def test_outside_pixels_are_counted_and_filled():
    rng = np.random.default_rng(5)  # seed recorded
    array = rng.normal(50.0, 10.0, size=(20, 20, 20)).astype(np.float32)
    image = sitk.GetImageFromArray(array)  # identity geometry, 1 mm
    # Runs past the top in z and close to the x = 0 face, so some pixels leave the image.
    line = Centerline([[1.3, 10.2, 2.1], [1.3, 10.2, 26.1]])
    cs = sample_cross_sections(image, line, points=9, size=7, pixel_mm=1.0, fill_value=-2048.0)
    ijk = sitk_index(image, cs.points_mm)
    outside = ((ijk < 0) | (ijk > np.array(image.GetSize()) - 1)).any(axis=1)
    assert 0 < cs.n_outside == int(outside.sum())
    values = cs.values.reshape(-1)
    assert (values[outside] == -2048.0).all()
    reference = ndimage.map_coordinates(array, ijk[~outside][:, ::-1].T, order=1)
    assert np.abs(values[~outside] - reference).max() < 1e-4
    # The default fill is air, -1000 HU (Hounsfield scale definition).
    assert (sample_cross_sections(image, line, points=9, size=7, pixel_mm=1.0).values
            .reshape(-1)[outside] == -1000.0).all()


def test_integer_images_are_cast_to_float32():
    image = sitk.Image([10, 10, 10], sitk.sitkInt16) + 300
    cs = sample_cross_sections(image, Centerline([[5.0, 5, 1], [5, 5, 8]]), points=3, size=3,
                               pixel_mm=1.0)
    assert cs.values.dtype == np.float32 and (cs.values == 300.0).all()


def test_results_are_read_only_and_described():
    image = sitk.Image([10, 10, 10], sitk.sitkFloat32)
    cs = sample_cross_sections(image, Centerline([[5.0, 5, 1], [5, 5, 8]]), points=3, size=4,
                               pixel_mm=0.5)
    assert cs.values.shape == (3, 4, 4) and cs.points_mm.shape == (3, 4, 4, 3)
    assert cs.frames.shape == (3, 3, 3) and cs.arc_mm.shape == (3,)
    with pytest.raises(ValueError):
        cs.values[0, 0, 0] = 1.0
    text = repr(cs)
    assert "3 sections x 4x4 px at 0.5 mm" in text and "HU" in text and "0 px outside" in text


_IMAGE = sitk.Image([8, 8, 8], sitk.sitkFloat32)
_LINE = Centerline([[4.0, 4, 1], [4, 4, 6]])


@pytest.mark.parametrize(
    "image, line, options, words",
    [
        (np.zeros((8, 8, 8)), _LINE, {}, "image: expected a SimpleITK image"),
        (sitk.Image([8, 8], sitk.sitkFloat32), _LINE, {}, "image: expected a 3D image"),
        (sitk.Image([8, 8, 8], sitk.sitkVectorFloat32, 2), _LINE, {}, "scalar image"),
        (_IMAGE, np.zeros((4, 3)), {}, "centerline: expected an explain.geometry.Centerline"),
        (_IMAGE, _LINE, {"points": 1}, "points: expected an integer >= 2"),
        (_IMAGE, _LINE, {"points": 4.0}, "points: expected an integer"),
        (_IMAGE, _LINE, {"size": 0}, "size: expected an integer >= 1"),
        (_IMAGE, _LINE, {"pixel_mm": 0.0}, "pixel_mm: expected a finite number > 0"),
        (_IMAGE, _LINE, {"pixel_mm": -1.0}, "pixel_mm"),
        (_IMAGE, _LINE, {"pixel_mm": float("nan")}, "pixel_mm"),
        (_IMAGE, _LINE, {"rotation_deg": float("inf")}, "rotation_deg: expected a finite"),
        (_IMAGE, _LINE, {"fill_value": "air"}, "fill_value: expected a number"),
    ],
)
def test_bad_inputs_raise_input_error(image, line, options, words):
    kwargs = {"points": 4, "size": 3, "pixel_mm": 1.0, **options}
    with pytest.raises(InputError, match=words.replace("(", r"\(").replace(")", r"\)")):
        sample_cross_sections(image, line, **kwargs)


def test_cross_sections_validate_their_shapes():
    with pytest.raises(InputError, match="points_mm: expected shape"):
        CrossSections(values=np.zeros((2, 3, 3), np.float32), points_mm=np.zeros((2, 3, 3)),
                      arc_mm=np.zeros(2), frames=np.zeros((2, 3, 3)), pixel_mm=1.0,
                      rotation_deg=0.0, fill_value=-1000.0, n_outside=0)
