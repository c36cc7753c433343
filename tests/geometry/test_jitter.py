"""The lateral jitter of a centerline: size, direction, smoothness, seeding."""

import numpy as np
import pytest

from explain.errors import InputError
from explain.geometry import Centerline
from explain.geometry.jitter import lateral_jitter


def _arc(n=40):
    t = np.linspace(0, np.pi / 2, n)
    return Centerline(np.c_[30 * np.cos(t), 30 * np.sin(t), 5 * t])   # a bent, rising vessel


def test_rms_is_exact_and_shift_is_perpendicular_to_the_tangent():
    line = _arc()
    moved, shift = lateral_jitter(line, rms_mm=0.5, rng=np.random.default_rng(0))
    assert np.sqrt((shift**2).sum(axis=1).mean()) == pytest.approx(0.5, rel=1e-12)
    _, _, tangents = line.even_samples(len(shift))
    assert np.abs((shift * tangents).sum(axis=1)).max() < 1e-9
    assert moved.length_mm == pytest.approx(line.length_mm, rel=0.02)


def test_shift_is_smooth_along_the_arc():
    # Gaussian-smoothed noise of sd 5 mm: neighbours 0.25 mm apart move almost together.
    # (Common practice, no source: the lag-1 correlation of such noise is exp(-d^2 / 4 sd^2).)
    _, shift = lateral_jitter(_arc(), rms_mm=0.5, correlation_mm=5.0,
                              rng=np.random.default_rng(1))
    step = np.linalg.norm(np.diff(shift, axis=0), axis=1)
    assert step.max() < 0.1 * np.linalg.norm(shift, axis=1).max()


def test_seeded_and_zero_rms():
    line = _arc()
    a = lateral_jitter(line, rng=np.random.default_rng(7))[1]
    b = lateral_jitter(line, rng=np.random.default_rng(7))[1]
    c = lateral_jitter(line, rng=np.random.default_rng(8))[1]
    assert np.array_equal(a, b) and not np.allclose(a, c)
    assert not lateral_jitter(line, rms_mm=0.0, rng=np.random.default_rng(7))[1].any()


@pytest.mark.parametrize("kwargs, match", [
    ({"rms_mm": -1.0}, "rms_mm"), ({"rms_mm": "x"}, "rms_mm"),
    ({"correlation_mm": float("nan")}, "correlation_mm"), ({"rng": 3}, "rng")])
def test_bad_options(kwargs, match):
    options = {"rng": np.random.default_rng(0), **kwargs}
    with pytest.raises(InputError, match=match):
        lateral_jitter(_arc(), **options)
