"""Centerline: validation, arc length, resampling and rotation-minimizing frames.

Outside references: analytic circle and helix geometry; Bishop, "There is more than one way
to frame a curve", Amer Math Monthly 1975;82:246-251 (parallel-transport frames, twist
against Frenet = minus the integrated torsion); Wang, Juttler, Zheng, Liu, "Computation of
rotation minimizing frames", ACM Trans Graph 2008;27(1):2 (double reflection, fourth-order
global error).
"""

import numpy as np
import pytest

from explain.errors import InputError
from explain.geometry import Centerline, default_initial_normal, rotation_minimizing_frames

A, B = 2.0, 0.5  # helix radius and pitch/(2 pi), mm
C = np.hypot(A, B)


def helix(t):
    """Helix (a cos t, a sin t, b t): points, unit tangent, Frenet normal and binormal, and
    the exact rotation-minimizing normal started at the Frenet normal.

    Torsion is b/c^2 and arc length c t; a rotation-minimizing normal R = cos(phi) N +
    sin(phi) B satisfies phi' = -torsion (Bishop 1975), so phi(t) = -b t / c.
    """
    p = np.stack([A * np.cos(t), A * np.sin(t), B * t], axis=-1)
    tangent = np.stack([-A * np.sin(t), A * np.cos(t), np.full_like(t, B)], axis=-1) / C
    normal = np.stack([-np.cos(t), -np.sin(t), np.zeros_like(t)], axis=-1)
    binormal = np.cross(tangent, normal)
    phi = -B * t / C
    rmf = np.cos(phi)[:, None] * normal + np.sin(phi)[:, None] * binormal
    return p, tangent, normal, binormal, rmf


def circle_arc(radius, sweep, n):
    theta = np.linspace(0.0, sweep, n)
    return np.stack([radius * np.cos(theta), radius * np.sin(theta), np.zeros(n)], axis=-1)


# -- validation -------------------------------------------------------------------------


@pytest.mark.parametrize(
    "points, words",
    [
        ([[0.0, 0.0, 0.0]], "at least 2 distinct"),
        ([[1.0, 2.0, 3.0]] * 4, "at least 2 distinct"),  # zero length
        (np.zeros((0, 3)), "at least 2 distinct"),
        ([[0.0, 0.0], [1.0, 1.0]], "(n, 3)"),
        ([[0.0, 0.0, np.nan], [1.0, 1.0, 1.0]], "NaN or infinite"),
        ([[0.0, 0.0, 0.0], [1.0, np.inf, 1.0]], "NaN or infinite"),
        ("not numbers", "(n, 3)"),
    ],
)
def test_bad_points_raise_input_error_naming_the_problem(points, words):
    with pytest.raises(InputError, match="points_mm") as info:
        Centerline(points)
    assert words in str(info.value)


def test_consecutive_duplicates_are_dropped_with_a_note():
    pts = [[0.0, 0, 0], [1.0, 0, 0], [1.0, 0, 0], [2.0, 0, 0], [2.0, 0, 0]]
    line = Centerline(pts)
    assert len(line) == 3
    assert line.points_mm.tolist() == [[0.0, 0, 0], [1.0, 0, 0], [2.0, 0, 0]]
    assert line.notes == ("dropped 2 consecutive duplicate point(s) at rows [2, 4]",)
    assert Centerline([[0.0, 0, 0], [1.0, 0, 0]]).notes == ()


def test_points_are_read_only_copies():
    pts = np.array([[0.0, 0, 0], [1.0, 0, 0]])
    line = Centerline(pts)
    pts[0, 0] = 5.0
    assert line.points_mm[0, 0] == 0.0
    with pytest.raises(ValueError):
        line.points_mm[0, 0] = 1.0


@pytest.mark.parametrize("n", [1, 0, 2.5, True, "8"])
def test_resample_rejects_bad_counts(n):
    with pytest.raises(InputError, match="n: expected an integer"):
        Centerline([[0.0, 0, 0], [1.0, 0, 0]]).resample(n)


def test_position_at_rejects_arc_beyond_the_ends():
    line = Centerline([[0.0, 0, 0], [0.0, 0, 10.0]])
    with pytest.raises(InputError, match=r"\[0, 10\] mm"):
        line.position_at(10.5)
    with pytest.raises(InputError, match="finite"):
        line.position_at(np.nan)


# -- arc length and resampling (analytic geometry) ---------------------------------------


def test_straight_line_arc_and_positions_are_exact():
    # Elementary: a polyline of collinear points is its own smooth interpolant.
    line = Centerline([[1.0, 2.0, 3.0], [1.0, 2.0, 5.0], [1.0, 2.0, 11.0]])
    assert line.length_mm == pytest.approx(8.0, abs=1e-12)
    assert np.allclose(line.arc_mm, [0.0, 2.0, 8.0], atol=1e-12)
    assert np.allclose(line.position_at([0.0, 4.0, 8.0]), [[1, 2, 3], [1, 2, 7], [1, 2, 11]])


def test_circle_arc_length_matches_analytic_length():
    # Analytic: an arc of radius R sweeping theta has length R * theta.
    radius, sweep = 7.0, 1.5 * np.pi
    line = Centerline(circle_arc(radius, sweep, 25))
    exact = radius * sweep
    assert line.length_mm == pytest.approx(exact, rel=2e-6)
    # The polyline through the same points is measurably shorter (chord < arc), so the
    # smooth interpolant is what is measured, not the chords.
    chords = np.linalg.norm(np.diff(line.points_mm, axis=0), axis=1).sum()
    assert exact - chords > 1e-3 * exact
    resampled = line.resample(50)
    assert resampled.length_mm == pytest.approx(exact, rel=2e-6)


def test_resample_is_evenly_spaced_in_arc_length_on_a_circle():
    # Analytic: on a circle, equal arc steps are equal angle steps, and points stay at radius R.
    radius, sweep, n = 7.0, 1.5 * np.pi, 50
    line = Centerline(circle_arc(radius, sweep, 25)).resample(n)
    angle = np.unwrap(np.arctan2(line.points_mm[:, 1], line.points_mm[:, 0]))
    assert np.allclose(np.diff(angle), sweep / (n - 1), atol=1e-5)
    assert np.allclose(np.linalg.norm(line.points_mm, axis=1), radius, atol=1e-3)
    assert np.allclose(np.diff(line.arc_mm), radius * sweep / (n - 1), rtol=1e-5)
    assert line.points_mm[0].tolist() == circle_arc(radius, sweep, 25)[0].tolist()
    assert np.allclose(line.points_mm[-1], circle_arc(radius, sweep, 25)[-1], atol=1e-12)


def test_resample_of_unevenly_spaced_points_is_even():
    # Same circle, points crowded towards one end: even spacing must not follow the input.
    radius, sweep = 5.0, np.pi
    theta = sweep * np.linspace(0.0, 1.0, 30) ** 2
    pts = np.stack([radius * np.cos(theta), radius * np.sin(theta), np.zeros(30)], axis=-1)
    line = Centerline(pts).resample(41)
    angle = np.unwrap(np.arctan2(line.points_mm[:, 1], line.points_mm[:, 0]))
    assert np.allclose(np.diff(angle), sweep / 40, atol=2e-4)


def test_position_at_on_circle_matches_analytic_point():
    radius, sweep = 7.0, 1.5 * np.pi
    line = Centerline(circle_arc(radius, sweep, 25))
    arc = np.array([0.0, 3.3, 17.0, 30.0])
    theta = arc / radius
    exact = np.stack([radius * np.cos(theta), radius * np.sin(theta), np.zeros(4)], axis=-1)
    assert np.allclose(line.position_at(arc), exact, atol=1e-3)
    assert line.position_at(3.3).shape == (3,)


def test_helix_length_matches_analytic_length():
    # Analytic: the helix has arc length c t per parameter t, c = sqrt(a^2 + b^2).
    t = np.linspace(0.0, 4 * np.pi, 80)
    line = Centerline(helix(t)[0])
    assert line.length_mm == pytest.approx(C * 4 * np.pi, rel=1e-6)


# -- rotation-minimizing frames ----------------------------------------------------------


def test_helix_rmf_turns_against_frenet_by_minus_2pi_b_over_c_per_turn():
    # Bishop 1975: the rotation-minimizing normal turns against the Frenet normal by minus
    # the integrated torsion, -(b / c^2) * (2 pi c) = -2 pi b / c per turn.
    t = np.linspace(0.0, 2 * np.pi, 200)
    p, tangent, normal, binormal, _ = helix(t)
    frames = rotation_minimizing_frames(p, tangent, initial_normal=normal[0])
    end = frames[-1, 1]
    angle = np.arctan2(end @ binormal[-1], end @ normal[-1])
    assert angle == pytest.approx(-2 * np.pi * B / C, abs=1e-6)


def test_double_reflection_converges_at_fourth_order_on_exact_helix_samples():
    # Wang et al. 2008: the double-reflection method has fourth-order global error.
    # Exact helix points and tangents, three resolutions over one turn.
    errors = []
    for n in (17, 33, 65):
        t = np.linspace(0.0, 2 * np.pi, n)
        p, tangent, normal, _, rmf = helix(t)
        frames = rotation_minimizing_frames(p, tangent, initial_normal=normal[0])
        errors.append(np.abs(frames[:, 1] - rmf).max())
    orders = np.log2(np.array(errors[:-1]) / np.array(errors[1:]))
    assert np.allclose(orders, 4.0, atol=0.15), orders


def test_centerline_frames_on_a_helix_follow_the_bishop_normal():
    # The spline-based frames on a resampled helix agree with the exact rotation-minimizing
    # normal (Bishop 1975), within the spline's tangent error.
    t = np.linspace(0.0, 4 * np.pi, 80)
    p, _, normal, _, _ = helix(t)
    line = Centerline(p).resample(120)
    frames = line.frames(initial_normal=normal[0])
    exact = helix(line.points_mm[:, 2] / B)
    assert np.abs(frames[:, 0] - exact[1]).max() < 2e-3
    assert np.abs(frames[:, 1] - exact[4]).max() < 2e-3


def _assert_orthonormal_right_handed(frames):
    gram = np.einsum("nij,nkj->nik", frames, frames)
    assert np.allclose(gram, np.eye(3), atol=1e-12)
    assert np.allclose(np.linalg.det(frames), 1.0, atol=1e-12)


def test_frames_are_orthonormal_and_right_handed():
    rng = np.random.default_rng(20261201)  # seed recorded
    pts = np.cumsum(rng.normal(size=(40, 3)), axis=0)
    _assert_orthonormal_right_handed(Centerline(pts).frames())
    t = np.linspace(0.0, 6 * np.pi, 300)
    _assert_orthonormal_right_handed(Centerline(helix(t)[0]).frames())


def test_no_twist_on_a_straight_line():
    # A straight line has zero torsion: the rotation-minimizing normal is constant (Bishop 1975).
    line = Centerline([[0.0, 0, 0], [1.0, 1.0, 1.0], [4.0, 4.0, 4.0]]).resample(30)
    frames = line.frames()
    assert np.allclose(frames[:, 1], frames[0, 1], atol=1e-14)
    assert np.allclose(frames[:, 0], np.ones(3) / np.sqrt(3), atol=1e-14)


def test_no_twist_and_no_flip_on_an_inflecting_planar_s_curve():
    # A planar curve's plane normal is parallel along it, hence rotation-minimizing (Bishop
    # 1975); the Frenet normal would flip at the inflection x = pi.
    x = np.linspace(0.0, 2 * np.pi, 60)
    line = Centerline(np.stack([x, np.sin(x), np.zeros_like(x)], axis=-1)).resample(90)
    frames = line.frames(initial_normal=[0.0, 0.0, 1.0])
    assert np.allclose(frames[:, 1], [0.0, 0.0, 1.0], atol=1e-12)
    # The in-plane axis turns smoothly through the inflection: consecutive binormals agree.
    assert (np.einsum("ni,ni->n", frames[1:, 2], frames[:-1, 2]) > 0.9).all()
    assert np.allclose(frames[:, 2, 2], 0.0, atol=1e-12)


def test_default_initial_normal_is_the_least_aligned_world_axis():
    # Deterministic choice documented in default_initial_normal (our convention, no source).
    assert default_initial_normal([0.0, 0.0, 5.0]).tolist() == [1.0, 0.0, 0.0]
    assert default_initial_normal([1.0, 0.0, 0.0]).tolist() == [0.0, 1.0, 0.0]
    n = default_initial_normal([1.0, 0.2, 0.9])
    t = np.array([1.0, 0.2, 0.9]) / np.linalg.norm([1.0, 0.2, 0.9])
    # y is least aligned: the normal is y minus its tangent component, normalised.
    expected = np.array([0.0, 1.0, 0.0]) - t[1] * t
    assert np.allclose(n, expected / np.linalg.norm(expected), atol=1e-15)
    line = Centerline([[0.0, 0, 0], [0.0, 0, 1.0]])
    assert line.frames()[0, 1].tolist() == [1.0, 0.0, 0.0]


def test_initial_normal_parallel_to_tangent_is_rejected():
    line = Centerline([[0.0, 0, 0], [0.0, 0, 1.0]])
    with pytest.raises(InputError, match="initial_normal"):
        line.frames(initial_normal=[0.0, 0.0, 2.0])
    with pytest.raises(InputError, match="initial_normal"):
        line.frames(initial_normal=[0.0, 1.0])


def test_rotation_minimizing_frames_rejects_bad_tangents():
    pts = np.array([[0.0, 0, 0], [0, 0, 1.0]])
    with pytest.raises(InputError, match="tangents"):
        rotation_minimizing_frames(pts, np.zeros((2, 3)))
    with pytest.raises(InputError, match="tangents"):
        rotation_minimizing_frames(pts, np.ones((3, 3)))


def test_arc_length_of_a_sparse_sharply_bent_spline_agrees_with_scipy_quad():
    # scipy.integrate.quad of |C'(s)| on the same not-a-knot CubicSpline (chord-length
    # parameter): checks the Gauss-Legendre panels where one interval bends hard.
    from scipy.integrate import quad
    from scipy.interpolate import CubicSpline

    pts = np.array([[0.0, 0, 0], [16.0, 2, 1], [20.0, 12, -3], [30.0, 9, 8], [31.0, 9.5, 8.2],
                    [34.0, 12, 10]])
    param = np.concatenate([[0.0], np.cumsum(np.linalg.norm(np.diff(pts, axis=0), axis=1))])
    derivative = CubicSpline(param, pts, axis=0).derivative()
    pieces = [
        quad(lambda s: np.linalg.norm(derivative(s)), a, b, epsabs=1e-13, epsrel=1e-13)[0]
        for a, b in zip(param[:-1], param[1:])
    ]
    line = Centerline(pts)
    assert np.allclose(line.arc_mm, np.concatenate([[0.0], np.cumsum(pieces)]), rtol=1e-9)
    # Inverse map: position_at(arc_mm) returns the points themselves.
    assert np.allclose(line.position_at(line.arc_mm), pts, atol=1e-8)
