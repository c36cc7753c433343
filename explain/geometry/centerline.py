"""Vessel centerlines: a smooth curve through the given points, arc length, frames.

A :class:`Centerline` holds the points of one segment, proximal to distal, in mm in the
image's physical space. Everything measured along it (arc length, resampling, positions)
uses one smooth interpolant: a cubic spline (scipy ``CubicSpline``, not-a-knot ends)
parametrised by cumulative chord length. Arc length along that spline is integrated with
8-point Gauss-Legendre quadrature on four panels per interval and inverted with a safeguarded
Newton iteration, so resampled points are evenly spaced on the smooth curve, not on the
polyline.

Frames are rotation-minimizing (no twist about the tangent), built with the double-reflection
method of Wang, Juttler, Zheng and Liu (ACM Trans Graph 2008;27(1):2), which has
fourth-order global error, rather than the Frenet frame (undefined on straight pieces and
flipping at inflections).
"""

from __future__ import annotations

import numbers

import numpy as np
from scipy.interpolate import CubicSpline

from ..errors import InputError

__all__ = ["Centerline", "rotation_minimizing_frames", "default_initial_normal"]

# Consecutive points closer than this are one point (scanner coordinates carry ~1e-3 mm
# of precision at best, so 1e-6 mm is far below anything meaningful).
DUPLICATE_MM = 1e-6

_GAUSS_X, _GAUSS_W = np.polynomial.legendre.leggauss(8)
_PANELS = 4  # quadrature panels per spline interval


def _as_points(points, name):
    try:
        array = np.array(points, dtype=np.float64)
    except (TypeError, ValueError) as exc:
        raise InputError(
            f"{name}: expected an (n, 3) array of numbers in mm, got {type(points).__name__} "
            f"that cannot be read as numbers ({exc})"
        ) from None
    if array.ndim != 2 or array.shape[1] != 3:
        raise InputError(
            f"{name}: expected an (n, 3) array of x, y, z in mm, got shape {array.shape}; "
            "give one row per centerline point"
        )
    bad = ~np.isfinite(array).all(axis=1)
    if bad.any():
        rows = np.flatnonzero(bad)
        raise InputError(
            f"{name}: rows {rows[:5].tolist()}{' ...' if rows.size > 5 else ''} hold NaN or "
            f"infinite coordinates ({rows.size} of {len(array)} rows); every point needs finite "
            "x, y, z in mm"
        )
    return array


def default_initial_normal(tangent):
    """The deterministic first normal used when none is given.

    The world axis (x, y or z) least aligned with the tangent, ties going to the lower axis,
    with its tangent component removed and normalised. It is defined for any tangent and
    depends only on the tangent's direction.

    Parameters
    ----------
    tangent : (3,) float
        Tangent at the first point (need not be unit length).

    Returns
    -------
    (3,) float64
        Unit vector perpendicular to ``tangent``.

    Examples
    --------
    >>> default_initial_normal([0.0, 0.0, 2.0]).tolist()
    [1.0, 0.0, 0.0]
    """
    t = np.asarray(tangent, dtype=np.float64)
    t = t / np.linalg.norm(t)
    axis = np.zeros(3)
    axis[int(np.argmin(np.abs(t)))] = 1.0
    normal = axis - np.dot(axis, t) * t
    return normal / np.linalg.norm(normal)


def rotation_minimizing_frames(points, tangents, *, initial_normal=None):
    """Rotation-minimizing frames along sampled points by double reflection.

    Implements Algorithm "double reflection" of Wang, Juttler, Zheng and Liu, "Computation of
    rotation minimizing frames", ACM Trans Graph 2008;27(1):2. Each step reflects the frame
    in the bisecting plane of the chord, then in the plane that maps the reflected tangent
    onto the next tangent.

    Parameters
    ----------
    points : (n, 3) float, mm
        Points along the curve, distinct consecutive points.
    tangents : (n, 3) float
        Tangent at each point (normalised here).
    initial_normal : (3,) float, optional
        Normal at the first point; its tangent component is removed. Default:
        :func:`default_initial_normal` of the first tangent.

    Returns
    -------
    (n, 3, 3) float64
        Rows ``tangent, normal, binormal`` with ``binormal = tangent x normal``.

    Examples
    --------
    >>> pts = np.array([[0.0, 0, 0], [0, 0, 1], [0, 0, 2]])
    >>> f = rotation_minimizing_frames(pts, np.tile([0.0, 0, 1], (3, 1)))
    >>> f[-1].tolist()
    [[0.0, 0.0, 1.0], [1.0, 0.0, 0.0], [0.0, 1.0, 0.0]]
    """
    x = _as_points(points, "points")
    t = np.array(tangents, dtype=np.float64)
    if t.shape != x.shape:
        raise InputError(
            f"tangents: expected shape {x.shape} like points, got {t.shape}; give one tangent "
            "per point"
        )
    norms = np.linalg.norm(t, axis=1)
    if not (np.isfinite(norms).all() and (norms > 0).all()):
        rows = np.flatnonzero(~(np.isfinite(norms) & (norms > 0)))
        raise InputError(
            f"tangents: every tangent must be finite and non-zero, rows {rows[:5].tolist()} "
            "are not (a centerline that stops and turns back has no direction there; smooth "
            "or split it)"
        )
    t = t / norms[:, None]
    if initial_normal is None:
        r = default_initial_normal(t[0])
    else:
        r = np.array(initial_normal, dtype=np.float64).reshape(-1)
        if r.shape != (3,) or not np.isfinite(r).all():
            raise InputError(
                f"initial_normal: expected 3 finite numbers, got {np.shape(initial_normal)}"
            )
        r = r - np.dot(r, t[0]) * t[0]
        if np.linalg.norm(r) < 1e-9:
            raise InputError(
                "initial_normal: it is parallel to the first tangent; give a vector that "
                "is not along the centerline's first direction"
            )
        r = r / np.linalg.norm(r)
    normals = np.empty_like(x)
    normals[0] = r
    chords = np.diff(x, axis=0)
    # Plain Python floats: the recurrence is sequential and numpy overhead per tiny vector
    # would dominate.
    rx, ry, rz = r
    for i, (v1, ti, tn) in enumerate(zip(chords.tolist(), t[:-1].tolist(), t[1:].tolist())):
        c1 = v1[0] * v1[0] + v1[1] * v1[1] + v1[2] * v1[2]
        if c1 == 0.0:
            raise InputError(f"points: points {i} and {i + 1} coincide; drop duplicates first")
        a = 2.0 / c1 * (v1[0] * rx + v1[1] * ry + v1[2] * rz)
        lx, ly, lz = rx - a * v1[0], ry - a * v1[1], rz - a * v1[2]
        b = 2.0 / c1 * (v1[0] * ti[0] + v1[1] * ti[1] + v1[2] * ti[2])
        v2 = (tn[0] - (ti[0] - b * v1[0]), tn[1] - (ti[1] - b * v1[1]), tn[2] - (ti[2] - b * v1[2]))
        c2 = v2[0] * v2[0] + v2[1] * v2[1] + v2[2] * v2[2]
        if c2 > 1e-30:
            g = 2.0 / c2 * (v2[0] * lx + v2[1] * ly + v2[2] * lz)
            lx, ly, lz = lx - g * v2[0], ly - g * v2[1], lz - g * v2[2]
        # Remove round-off drift off the tangent plane (an O(1e-16) correction per step).
        d = lx * tn[0] + ly * tn[1] + lz * tn[2]
        lx, ly, lz = lx - d * tn[0], ly - d * tn[1], lz - d * tn[2]
        n = (lx * lx + ly * ly + lz * lz) ** 0.5
        rx, ry, rz = lx / n, ly / n, lz / n
        normals[i + 1] = (rx, ry, rz)
    binormals = np.cross(t, normals)
    return np.stack([t, normals, binormals], axis=1)


def distinct_rows(points_mm):
    """Which rows a :class:`Centerline` keeps: the one de-duplication rule for per-point data.

    Every per-point array read beside the points (radius, and any column added later) must be
    indexed with this mask so that it stays row-aligned with :attr:`Centerline.points_mm`.

    Parameters
    ----------
    points_mm : (n, 3) float, mm
        Points in input order.

    Returns
    -------
    (n,) bool
        True for a kept row: the first row, and each row more than ``DUPLICATE_MM`` from the
        row before it.

    Examples
    --------
    >>> distinct_rows([[0.0, 0.0, 0.0], [0.0, 0.0, 1e-7], [3.0, 4.0, 0.0]]).tolist()
    [True, False, True]
    """
    points = np.asarray(points_mm, dtype=np.float64)
    if len(points) < 2:
        return np.ones(len(points), dtype=bool)
    step = np.linalg.norm(np.diff(points, axis=0), axis=1)
    return np.concatenate([[True], step > DUPLICATE_MM])


class Centerline:
    """The centerline of one vessel segment, proximal to distal, in mm.

    Parameters
    ----------
    points_mm : (n, 3) float
        Points x, y, z in mm (image physical space, ITK LPS). Consecutive duplicates (closer
        than 1e-6 mm) are dropped and reported in :attr:`notes`.

    Attributes
    ----------
    points_mm : (n, 3) float64, mm
        The kept points (read-only).
    arc_mm : (n,) float64, mm
        Arc length along the smooth interpolant at each point, 0 at the first.
    length_mm : float
        Total arc length of the smooth interpolant.
    notes : tuple of str
        What was changed on input (dropped duplicates).

    Raises
    ------
    InputError
        Not an (n, 3) array, NaN or infinite values, fewer than 2 distinct points (zero length).

    Examples
    --------
    >>> c = Centerline([[0.0, 0.0, 0.0], [0.0, 0.0, 0.0], [3.0, 4.0, 0.0]])
    >>> round(c.length_mm, 9), len(c), c.notes
    (5.0, 2, ('dropped 1 consecutive duplicate point(s) at rows [1]',))
    >>> c.resample(6).arc_mm.round(6).tolist()
    [0.0, 1.0, 2.0, 3.0, 4.0, 5.0]
    """

    __slots__ = (
        "_points", "_notes", "_param", "_spline", "_dspline", "_panel_s", "_panel_arc", "_knot_arc"
    )

    def __init__(self, points_mm):
        points = _as_points(points_mm, "points_mm")
        notes = []
        if len(points) > 1:
            duplicate = ~distinct_rows(points)
            if duplicate.any():
                rows = np.flatnonzero(duplicate)
                shown = rows[:10].tolist()
                notes.append(
                    f"dropped {rows.size} consecutive duplicate point(s) at rows "
                    f"{shown}{' ...' if rows.size > 10 else ''}"
                )
                points = points[~duplicate]
        if len(points) < 2:
            raise InputError(
                f"points_mm: need at least 2 distinct points (a centerline of non-zero "
                f"length), got {len(points)} distinct point(s); check that the centerline "
                "is not empty or a single repeated point"
            )
        points.setflags(write=False)
        self._points = points
        self._notes = tuple(notes)
        param = np.concatenate([[0.0], np.cumsum(np.linalg.norm(np.diff(points, axis=0), axis=1))])
        self._param = param
        self._spline = CubicSpline(param, points, axis=0)
        self._dspline = self._spline.derivative()
        # Arc length on panels (each spline interval split in _PANELS) with Gauss-Legendre
        # on each: accurate even where a sparse spline bends hard within one interval.
        fractions = np.arange(_PANELS) / _PANELS
        panel_s = np.append((param[:-1, None] + np.diff(param)[:, None] * fractions).ravel(),
                            param[-1])
        h = np.diff(panel_s) / 2.0
        nodes = (panel_s[:-1] + h)[:, None] + h[:, None] * _GAUSS_X
        speed = np.linalg.norm(self._dspline(nodes), axis=-1)
        panel_arc = np.concatenate([[0.0], np.cumsum(h * (speed @ _GAUSS_W))])
        self._panel_s, self._panel_arc = panel_s, panel_arc
        knot_arc = panel_arc[::_PANELS].copy()
        knot_arc.setflags(write=False)
        self._knot_arc = knot_arc

    # -- basic properties ------------------------------------------------------------
    @property
    def points_mm(self):
        return self._points

    @property
    def arc_mm(self):
        return self._knot_arc

    @property
    def length_mm(self):
        return float(self._knot_arc[-1])

    @property
    def notes(self):
        return self._notes

    def __len__(self):
        return len(self._points)

    def __repr__(self):
        start = np.array2string(self._points[0], precision=2, separator=", ")
        end = np.array2string(self._points[-1], precision=2, separator=", ")
        return (
            f"Centerline({len(self)} points, length {self.length_mm:.2f} mm, "
            f"from {start} to {end} mm)"
        )

    # -- arc length <-> spline parameter --------------------------------------------
    def _arc_in_panel(self, s, k):
        start = self._panel_s[k]
        half = (s - start) / 2.0
        nodes = (start + half)[:, None] + half[:, None] * _GAUSS_X
        speed = np.linalg.norm(self._dspline(nodes), axis=-1)
        return self._panel_arc[k] + half * (speed @ _GAUSS_W)

    def _param_of_arc(self, arc):
        """Spline parameter at the given arc lengths (safeguarded Newton, per panel)."""
        arc = np.asarray(arc, dtype=np.float64).reshape(-1)
        last = len(self._panel_s) - 2
        k = np.clip(np.searchsorted(self._panel_arc, arc, side="right") - 1, 0, last)
        lo, hi = self._panel_s[k], self._panel_s[k + 1]
        a0, a1 = self._panel_arc[k], self._panel_arc[k + 1]
        s = lo + (arc - a0) / (a1 - a0) * (hi - lo)
        tol = 1e-11 * max(self.length_mm, 1.0)  # mm; far below any image resolution
        for _ in range(30):
            residual = self._arc_in_panel(s, k) - arc
            if np.abs(residual).max(initial=0.0) <= tol:
                break
            speed = np.linalg.norm(self._dspline(s), axis=-1)
            s = np.clip(s - residual / np.maximum(speed, 1e-12), lo, hi)
        return s

    def _check_arc(self, arc_mm, name):
        arc = np.asarray(arc_mm, dtype=np.float64)
        if not np.isfinite(arc).all():
            raise InputError(f"{name}: arc lengths must be finite numbers in mm")
        tol = 1e-9 * max(self.length_mm, 1.0)
        if arc.size and (arc.min() < -tol or arc.max() > self.length_mm + tol):
            raise InputError(
                f"{name}: arc lengths must lie in [0, {self.length_mm:.6g}] mm (this "
                f"centerline's length), got {arc.min():.6g} to {arc.max():.6g} mm"
            )
        return np.clip(arc, 0.0, self.length_mm)

    # -- public operations -----------------------------------------------------------
    def position_at(self, arc_mm):
        """Point on the smooth centerline at the given arc length(s).

        Parameters
        ----------
        arc_mm : float or array of float, mm
            Arc length(s) from the first point, within ``[0, length_mm]``.

        Returns
        -------
        (3,) or (*arc_mm.shape, 3) float64, mm

        Examples
        --------
        >>> Centerline([[0.0, 0, 0], [0, 0, 10]]).position_at(2.5).round(9).tolist()
        [0.0, 0.0, 2.5]
        """
        arc = self._check_arc(arc_mm, "arc_mm")
        s = self._param_of_arc(arc)
        return self._spline(s).reshape(arc.shape + (3,))

    def tangent_at(self, arc_mm):
        """Unit tangent of the smooth centerline at the given arc length(s).

        Returns
        -------
        (3,) or (*arc_mm.shape, 3) float64
        """
        arc = self._check_arc(arc_mm, "arc_mm")
        d = self._dspline(self._param_of_arc(arc))
        d = d / np.linalg.norm(d, axis=-1, keepdims=True)
        return d.reshape(arc.shape + (3,))

    def resample(self, n):
        """``n`` points evenly spaced in arc length along the smooth centerline.

        The first and last points are kept exactly.

        Parameters
        ----------
        n : int
            Number of points, at least 2.

        Returns
        -------
        Centerline
            With the same notes as this one.
        """
        points, _, _ = self.even_samples(n)
        out = Centerline(points)
        out._notes = self._notes + out._notes
        return out

    def even_samples(self, n):
        """Points, arc lengths and unit tangents at ``n`` evenly spaced arc lengths.

        Everything is taken from this centerline's smooth interpolant (no second spline is
        fitted), which is what cross-section sampling uses.

        Parameters
        ----------
        n : int
            Number of samples, at least 2.

        Returns
        -------
        points : (n, 3) float64, mm
            First and last exactly this centerline's end points.
        arc_mm : (n,) float64, mm
            ``linspace(0, length_mm, n)``.
        tangents : (n, 3) float64
            Unit tangents of the interpolant there.
        """
        if isinstance(n, bool) or not isinstance(n, numbers.Integral) or n < 2:
            raise InputError(f"n: expected an integer number of points >= 2, got {n!r}")
        arc = np.linspace(0.0, self.length_mm, int(n))
        s = self._param_of_arc(arc)
        points = self._spline(s)
        points[0], points[-1] = self._points[0], self._points[-1]
        tangents = self._dspline(s)
        tangents /= np.linalg.norm(tangents, axis=1, keepdims=True)
        return points, arc, tangents

    def frames(self, *, initial_normal=None):
        """Rotation-minimizing frames at this centerline's points.

        Tangents are the smooth interpolant's derivative at each point; the frames come
        from :func:`rotation_minimizing_frames` (double reflection, Wang et al. 2008).

        Parameters
        ----------
        initial_normal : (3,) float, optional
            Normal at the first point. Default: the world axis least aligned with the first
            tangent (ties to the lower axis x < y < z), made perpendicular to it.

        Returns
        -------
        (n, 3, 3) float64
            Rows ``tangent, normal, binormal``.
        """
        tangents = self._dspline(self._param)
        return rotation_minimizing_frames(self._points, tangents, initial_normal=initial_normal)
