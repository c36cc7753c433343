"""Properties of centerlines, sampling and splatting that must hold for any valid input.

Example counts are kept small so the whole file runs in well under a minute on CI's 2 cores;
``derandomize=True`` makes every run draw the same examples (seeded, reproducible).
"""

import numpy as np
import SimpleITK as sitk
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from explain.geometry import Centerline, sample_cross_sections, splat

PROPS = settings(max_examples=25, deadline=None, derandomize=True, database=None,
                 suppress_health_check=[HealthCheck.too_slow])


@st.composite
def curves(draw, *, n_min=3, n_max=9):
    """A smooth-ish polyline: steps of 1-6 mm that turn by at most 60 degrees at each point."""
    n = draw(st.integers(n_min, n_max))
    seed = draw(st.integers(0, 2**32 - 1))
    rng = np.random.default_rng(seed)
    direction = rng.normal(size=3)
    direction /= np.linalg.norm(direction)
    points = [rng.uniform(-20, 20, size=3)]
    for _ in range(n - 1):
        turn = rng.normal(size=3)
        turn -= turn.dot(direction) * direction
        turn /= max(np.linalg.norm(turn), 1e-12)
        angle = rng.uniform(0, np.pi / 3)
        direction = np.cos(angle) * direction + np.sin(angle) * turn
        direction /= np.linalg.norm(direction)
        points.append(points[-1] + rng.uniform(1.0, 6.0) * direction)
    return np.array(points)


def _random_rotation(rng):
    q, r = np.linalg.qr(rng.normal(size=(3, 3)))
    q = q * np.sign(np.diag(r))
    if np.linalg.det(q) < 0:
        q[:, 0] = -q[:, 0]
    return q


@st.composite
def images(draw):
    """An empty image with random spacing, origin and direction (a proper rotation)."""
    seed = draw(st.integers(0, 2**32 - 1))
    rng = np.random.default_rng(seed)
    size = [int(v) for v in rng.integers(10, 18, size=3)]
    image = sitk.Image(size, sitk.sitkFloat32)
    image.SetSpacing([float(v) for v in rng.uniform(0.5, 1.5, size=3)])
    image.SetOrigin([float(v) for v in rng.uniform(-10, 10, size=3)])
    image.SetDirection([float(v) for v in _random_rotation(rng).ravel()])
    return image, rng


def _centre_line(image, rng):
    """A short straight-ish line through the middle of ``image``, in its physical space."""
    size = np.array(image.GetSize(), dtype=float)
    a = (size - 1) * rng.uniform(0.3, 0.45, size=3)
    b = (size - 1) * rng.uniform(0.55, 0.7, size=3)
    mid = (a + b) / 2 + rng.uniform(-1, 1, size=3)
    idx = [a, mid, b]
    return Centerline([image.TransformContinuousIndexToPhysicalPoint([float(v) for v in p])
                       for p in idx])


# -- Centerline --------------------------------------------------------------------------------

@PROPS
@given(curves())
def test_frames_are_orthonormal_right_handed_and_follow_the_curve(points):
    line = Centerline(points)
    frames = line.frames()
    gram = frames @ frames.transpose(0, 2, 1)
    np.testing.assert_allclose(gram, np.broadcast_to(np.eye(3), gram.shape), atol=1e-9)
    np.testing.assert_allclose(np.linalg.det(frames), 1.0, atol=1e-9)
    # tangent along the curve: an independent central difference of the position (not the
    # derivative the frames are built from), at every interior point
    h = 1e-4
    for arc, frame in zip(line.arc_mm[1:-1], frames[1:-1]):
        chord = line.position_at(arc + h) - line.position_at(arc - h)
        chord /= np.linalg.norm(chord)
        np.testing.assert_allclose(frame[0], chord, atol=1e-5)


@PROPS
@given(curves(), st.integers(2, 60))
def test_arc_length_increases_and_bounds_the_chords(points, n):
    line = Centerline(points)
    arc = line.arc_mm
    assert arc[0] == 0.0
    assert np.all(np.diff(arc) > 0)
    # a curve between two points is never shorter than the straight line (triangle inequality)
    chords = np.linalg.norm(np.diff(line.points_mm, axis=0), axis=1)
    assert np.all(np.diff(arc) >= chords - 1e-9)
    # evenly spaced in arc: consecutive samples are at most length / (n - 1) apart in a straight
    # line, and the ends are kept
    samples = line.resample(n).points_mm
    steps = np.linalg.norm(np.diff(samples, axis=0), axis=1)
    assert np.all(steps > 0)
    assert np.all(steps <= line.length_mm / (n - 1) + 1e-9)
    np.testing.assert_array_equal(samples[[0, -1]], line.points_mm[[0, -1]])


@PROPS
@given(curves(), st.integers(30, 80))
def test_arc_length_is_invariant_to_resampling(points, n):
    """A fresh spline through many evenly spaced points of the curve has nearly its length.

    Tolerance 1 %: common practice, no source (cubic interpolation of a smooth curve at n >= 30
    points; the error falls like n^-4).
    """
    line = Centerline(points)
    again = Centerline(line.resample(n).points_mm)
    np.testing.assert_allclose(again.length_mm, line.length_mm, rtol=1e-2)
    np.testing.assert_allclose(again.position_at(again.length_mm / 2),
                               line.position_at(line.length_mm / 2), atol=0.05 * line.length_mm)


# -- Sampling and splatting --------------------------------------------------------------------

@PROPS
@given(images(), st.floats(-900, 1500), st.integers(2, 6), st.integers(3, 7),
       st.floats(0.3, 1.2), st.floats(0, 360))
def test_splat_of_a_constant_map_is_that_constant_wherever_it_reaches(
        image_rng, value, points, size, pixel_mm, rotation):
    image, rng = image_rng
    line = _centre_line(image, rng)
    cs = sample_cross_sections(image, line, points=points, size=size, pixel_mm=pixel_mm,
                               rotation_deg=rotation)
    out, weight = splat(np.full(cs.shape, value), cs, like=image, return_weight=True)
    reached = sitk.GetArrayFromImage(weight) > 0
    assert reached.any()
    got = sitk.GetArrayFromImage(out)
    np.testing.assert_allclose(got[reached], value, rtol=1e-5, atol=1e-3)
    assert np.all(got[~reached] == 0)


@PROPS
@given(images(), st.integers(2, 6), st.integers(3, 9), st.floats(0.2, 1.0), st.floats(0, 360))
def test_sampling_a_linear_field_returns_it_exactly(image_rng, points, size, pixel_mm, rotation):
    """Trilinear interpolation reproduces any affine function of position exactly (it is exact
    on polynomials of degree one in each index; an affine map of physical space is affine in
    the index). Tolerance from float32 storage of the voxels."""
    image, rng = image_rng
    gradient = rng.uniform(-20, 20, size=3)          # HU per mm, physical axes
    offset = float(rng.uniform(-100, 100))
    nk, nj, ni = image.GetSize()[::-1]
    kk, jj, ii = np.meshgrid(np.arange(nk), np.arange(nj), np.arange(ni), indexing="ij")
    index = np.stack([ii, jj, kk], axis=-1).reshape(-1, 3).astype(float)
    spacing = np.array(image.GetSpacing())
    direction = np.array(image.GetDirection()).reshape(3, 3)
    physical = np.array(image.GetOrigin()) + (index * spacing) @ direction.T
    field = (physical @ gradient + offset).reshape(nk, nj, ni)
    linear = sitk.GetImageFromArray(field.astype(np.float32))
    linear.CopyInformation(image)
    line = _centre_line(image, rng)
    cs = sample_cross_sections(linear, line, points=points, size=size, pixel_mm=pixel_mm,
                               rotation_deg=rotation, fill_value=np.nan)
    inside = ~np.isnan(cs.values)
    assert inside.any()
    expected = cs.points_mm @ gradient + offset
    scale = np.abs(field).max()
    np.testing.assert_allclose(cs.values[inside], expected[inside], atol=2e-6 * scale + 1e-4)
