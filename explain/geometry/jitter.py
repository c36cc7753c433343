"""A smooth, seeded sideways shift of a centerline: the jitter of the stability check.

Every point moves within the plane normal to the vessel (along its normal and binormal), by two
independent random profiles along the arc: white noise on points 0.25 mm apart, smoothed with a
Gaussian of ``correlation_mm`` and scaled so that the root mean square of the shift, over the
points, is exactly ``rms_mm``. The shift is smooth, so the jittered centerline is a nearby vessel
path of the same shape, as a second tracing of the same vessel would be; its ends move too.
"""

from __future__ import annotations

import numpy as np
from scipy.ndimage import gaussian_filter1d

from ..errors import InputError
from .centerline import Centerline, rotation_minimizing_frames

__all__ = ["lateral_jitter"]

#: Spacing of the points on which the random shift is drawn, mm.
_STEP_MM = 0.25


def _positive(value, name):
    try:
        value = float(value)
    except (TypeError, ValueError):
        raise InputError(f"{name}: expected a number of mm, got {value!r}") from None
    if not np.isfinite(value) or value < 0:
        raise InputError(f"{name}: expected a finite number of mm >= 0, got {value}")
    return value


def lateral_jitter(centerline, *, rms_mm=0.5, correlation_mm=5.0, rng):
    """The centerline shifted sideways by a smooth random offset of RMS ``rms_mm``.

    Parameters
    ----------
    centerline : Centerline
    rms_mm : float
        Root mean square of the shift over the new points, mm (0 returns an even resampling).
    correlation_mm : float
        Standard deviation of the Gaussian that smooths the noise along the arc, mm.
    rng : numpy.random.Generator
        The only source of randomness (seed it for a repeatable shift).

    Returns
    -------
    (Centerline, shift_mm (n, 3) float64)
        The jittered centerline, on points about 0.25 mm apart along the original arc, and the
        shift of each point (perpendicular to the tangent there).

    Examples
    --------
    >>> line = Centerline([[0.0, 0.0, 0.0], [0.0, 0.0, 20.0]])
    >>> moved, shift = lateral_jitter(line, rms_mm=0.5, rng=np.random.default_rng(0))
    >>> round(float(np.sqrt((shift ** 2).sum(axis=1).mean())), 6)
    0.5
    >>> float(np.abs(shift[:, 2]).max())   # perpendicular to the tangent (here the z axis)
    0.0
    """
    if not isinstance(centerline, Centerline):
        raise InputError(f"centerline: expected a Centerline, got {type(centerline).__name__}")
    if not isinstance(rng, np.random.Generator):
        raise InputError("rng: expected a numpy Generator, e.g. numpy.random.default_rng(seed)")
    rms_mm = _positive(rms_mm, "rms_mm")
    correlation_mm = _positive(correlation_mm, "correlation_mm")
    n = max(2, int(np.ceil(centerline.length_mm / _STEP_MM)) + 1)
    points, _, tangents = centerline.even_samples(n)
    frames = rotation_minimizing_frames(points, tangents)  # rows tangent, normal, binormal
    noise = rng.standard_normal((n, 2))
    if correlation_mm > 0:
        noise = gaussian_filter1d(noise, correlation_mm / _STEP_MM, axis=0, mode="nearest")
    shift = noise[:, :1] * frames[:, 1] + noise[:, 1:] * frames[:, 2]
    rms = float(np.sqrt((shift**2).sum(axis=1).mean()))
    shift = shift * (rms_mm / rms) if rms > 0 else np.zeros_like(shift)
    return Centerline(points + shift), shift
