"""The layout of a synthetic coronary tree: SCCT segments as curved tubes on a heart-like sphere.

The heart is a sphere (the myocardium) wrapped in a shell of epicardial fat; the vessels run on a
slightly larger sphere inside that fat, along the grooves a real tree follows: the right
coronary artery and the circumflex in the atrioventricular groove (a ring near the base), the
left anterior descending in the anterior interventricular groove and the posterior descending
artery in the posterior one. Positions are written in "heart angles": ``theta`` from the base
pole (0 deg) to the apex (180 deg) and ``phi`` around the long axis (0 anterior, 90 left,
180 posterior, -90 right). The heart is then turned into an oblique, patient-like orientation in
ITK's LPS space (long axis pointing from the base, right-posterior-superior, to the apex,
left-anterior-inferior).

Every seed moves the control points a few degrees, changes the sphere, the split points between
segments, the orientation and the vessel calibres (within one Dodge 1992 SD), so cohorts
differ while staying plausible. Segment 15 (L-PDA) is never drawn: the trees are
right-dominant. Segments 17 (ramus) and 18 (L-PLB) appear in some seeds.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from scipy.interpolate import CubicSpline
from scipy.spatial.transform import Rotation

from ..geometry import Centerline
from .tissue import DIAMETER_KNOTS_MM, DODGE_SD_MM

__all__ = ["SegmentPath", "TreeLayout", "make_layout", "OPTIONAL_SEGMENTS", "NEVER_DRAWN"]

#: Segments drawn in some seeds only (ramus intermedius, L-PLB).
OPTIONAL_SEGMENTS = (17, 18)
#: Segments no phantom has (right-dominant trees have no L-PDA).
NEVER_DRAWN = (15,)

POINT_SPACING_MM = 0.5  # centerline spacing written to the CSVs
FAT_GAP_MM = 5.0  # vessel sphere minus myocardium sphere: every lumen sits in fat


@dataclass(frozen=True)
class SegmentPath:
    """One segment of a layout, before any lesion.

    Attributes
    ----------
    id : int
        SCCT 2014 segment number.
    points_mm : (n, 3) float64
        Centerline, physical space (LPS, mm), proximal to distal, about 0.5 mm apart.
    arc_mm : (n,) float64
        Arc length at each point (as :class:`explain.geometry.Centerline` measures it).
    radius_mm : (n,) float64
        Healthy lumen radius at each point.
    branches : tuple of (int, float, float)
        ``(child id, arc mm on this segment where it leaves, child's starting radius mm)``.
    parent : int or None
        The segment this one continues or leaves from.
    start_clearance_mm : float
        Radius of the parent's lumen where this segment starts (0 without a parent): the
        first stretch of this segment lies inside it.
    """

    id: int
    points_mm: np.ndarray = field(repr=False)
    arc_mm: np.ndarray = field(repr=False)
    radius_mm: np.ndarray = field(repr=False)
    branches: tuple = ()
    parent: int | None = None
    start_clearance_mm: float = 0.0

    @property
    def length_mm(self):
        return float(self.arc_mm[-1])

    def __repr__(self):
        return (f"SegmentPath(id={self.id}, points={len(self.points_mm)}, "
                f"length_mm={self.length_mm:.1f}, radius_mm={self.radius_mm[0]:.2f}->"
                f"{self.radius_mm[-1]:.2f})")


@dataclass(frozen=True)
class TreeLayout:
    """A whole tree: its segments and the heart it lies on.

    Attributes
    ----------
    segments : dict of int to SegmentPath
        Ascending SCCT number.
    centre_mm : (3,) float64
        Heart centre, physical space (mm).
    axes : (3, 3) float64
        Rows: unit vectors anterior, left, base of the heart, physical space.
    vessel_sphere_mm, myocardium_radius_mm : float
        Radius of the sphere the centerlines lie on, and of the myocardium inside it.
    """

    segments: dict = field(repr=False)
    centre_mm: np.ndarray = field(repr=False)
    axes: np.ndarray = field(repr=False)
    vessel_sphere_mm: float
    myocardium_radius_mm: float

    def __repr__(self):
        ids = ",".join(str(i) for i in self.segments)
        return (f"TreeLayout(segments=[{ids}], vessel_sphere_mm={self.vessel_sphere_mm:.1f}, "
                f"myocardium_radius_mm={self.myocardium_radius_mm:.1f})")


def _unit(theta_deg, phi_deg):
    t, p = np.radians(theta_deg), np.radians(phi_deg)
    return np.stack([np.sin(t) * np.cos(p), np.sin(t) * np.sin(p), np.cos(t)], axis=-1)


def _angles(local):
    """Heart angles (deg) of a point given in heart coordinates."""
    r = np.linalg.norm(local)
    return np.degrees(np.arccos(np.clip(local[2] / r, -1, 1))), np.degrees(
        np.arctan2(local[1], local[0]))


class _Builder:
    """Turns control points in heart angles into segment centerlines, one vessel at a time."""

    def __init__(self, rng, variation):
        self.rng = rng
        self.variation = variation
        self.radius = 32.0 + 2.0 * variation * rng.uniform(-1, 1)
        self.groove = 48.0 + 3.0 * variation * rng.uniform(-1, 1)  # AV groove latitude, deg
        base = np.array([-0.55, 0.45, 0.70])
        base /= np.linalg.norm(base)
        anterior = np.array([0.0, -1.0, 0.0]) - base * -base[1]
        anterior /= np.linalg.norm(anterior)
        left = np.cross(base, anterior)
        turn = Rotation.from_rotvec(rng.normal(0.0, 0.08 * variation, 3)).as_matrix()
        self.axes = (turn @ np.stack([anterior, left, base]).T).T
        self.centre = np.array([8.0, 140.0, -110.0]) + 5.0 * variation * rng.uniform(-1, 1, 3)
        # One calibre factor per vessel system: proximal diameter within one Dodge SD.
        self.scale = {}
        for system, proximal in (("RCA", 4.0), ("LM", 4.5), ("LAD", 3.7), ("LCx", 3.4)):
            self.scale[system] = 1.0 + DODGE_SD_MM * variation * rng.uniform(-1, 1) / proximal
        self.paths = {}
        self.parents = {}
        self.branches = {}
        self.clearance = {}

    def to_physical(self, local):
        return self.centre + local @ self.axes

    def to_local(self, point):
        return (np.asarray(point) - self.centre) @ self.axes.T

    def start_angles(self, segment_id, fraction=1.0):
        path = self.paths[segment_id]
        point = Centerline(path[0]).position_at(fraction * path[1][-1])
        return _angles(self.to_local(point))

    def vessel(self, controls, segment_ids, splits, system, *, parent=None, at=1.0, jitter=None):
        """Draw one vessel through heart-angle ``controls`` and cut it into ``segment_ids``.

        ``controls[0]`` is the start; later points move by up to ``jitter`` degrees. ``splits``
        are arc fractions where one segment ends and the next begins (each moved by up to 0.04).
        """
        controls = np.array(controls, dtype=float)
        if jitter is None:  # side branches shake less: they must not swing into their parent
            jitter = 3.0 if parent is None or len(segment_ids) > 1 else 2.0
        shake = self.rng.uniform(-1, 1, controls.shape) * jitter * self.variation
        shake[0] = 0.0
        controls = controls + shake
        knots = _unit(controls[:, 0], controls[:, 1]) * self.radius
        if parent is not None:
            knots[0] = self.to_local(Centerline(self.paths[parent][0]).position_at(
                at * self.paths[parent][1][-1]))
        chord = np.concatenate([[0.0], np.cumsum(np.linalg.norm(np.diff(knots, axis=0), axis=1))])
        dense = CubicSpline(chord, knots, axis=0)(np.linspace(0, chord[-1], 600))
        dense *= self.radius / np.linalg.norm(dense, axis=1, keepdims=True)  # back on the sphere
        if parent is not None:
            dense[0] = knots[0]
        whole = Centerline(self.to_physical(dense))
        cuts = [0.0] + [f + 0.04 * self.variation * self.rng.uniform(-1, 1) for f in splits] + [1.0]
        arc = np.asarray(whole.arc_mm)
        for n, segment_id in enumerate(segment_ids):
            lo, hi = cuts[n] * whole.length_mm, cuts[n + 1] * whole.length_mm
            inside = (arc > lo + 1e-6) & (arc < hi - 1e-6)
            piece = np.concatenate([whole.position_at(lo)[None], whole.points_mm[inside],
                                    whole.position_at(hi)[None]])
            count = max(int(round((hi - lo) / POINT_SPACING_MM)) + 1, 3)
            line = Centerline(piece).resample(count)
            d0, d1 = DIAMETER_KNOTS_MM[segment_id]
            radius = 0.5 * self.scale[system] * np.interp(line.arc_mm, [0, line.length_mm], [d0, d1])
            self.paths[segment_id] = (np.array(line.points_mm), np.array(line.arc_mm), radius)
            self.parents[segment_id] = segment_ids[n - 1] if n else parent
            if n:
                self.clearance[segment_id] = float(self.paths[segment_ids[n - 1]][2][-1])
            elif parent is not None:
                _, arc_p, radius_p = self.paths[parent]
                self.clearance[segment_id] = float(np.interp(at * arc_p[-1], arc_p, radius_p))
        if parent is not None:
            self.branches.setdefault(parent, []).append(
                (segment_ids[0], float(at * self.paths[parent][1][-1]),
                 float(self.paths[segment_ids[0]][2][0])))
        for a, b in zip(segment_ids[:-1], segment_ids[1:]):
            self.branches.setdefault(a, []).append(
                (b, float(self.paths[a][1][-1]), float(self.paths[b][2][0])))


def _branch(start, offsets):
    return [start] + [(start[0] + dt, start[1] + dp) for dt, dp in offsets]


def make_layout(rng, *, variation=1.0, include=()):
    """Draw one coronary tree.

    Parameters
    ----------
    rng : numpy.random.Generator
        The only source of randomness (the anatomy stream of a phantom's seed).
    variation : float
        Scale of every random change (0 gives the nominal tree, 1 the default spread).
    include : iterable of int
        Optional segments (17, 18) to draw whatever the seed says.

    Returns
    -------
    TreeLayout

    Examples
    --------
    >>> tree = make_layout(np.random.default_rng(0), variation=0.0)
    >>> sorted(tree.segments)
    [1, 2, 3, 4, 5, 6, 7, 8, 9, 10, 11, 12, 13, 14, 16]
    >>> round(float(2 * tree.segments[5].radius_mm[0]), 2)  # Dodge 1992: left main 4.5 mm
    4.5
    """
    b = _Builder(rng, variation)
    draw = rng.uniform(size=2)  # drawn even when unused, so the streams stay aligned
    with_ramus = (variation > 0 and draw[0] < 0.3) or 17 in include
    with_lplb = (variation > 0 and draw[1] < 0.3) or 18 in include
    g = b.groove
    b.vessel([(20, -25), (35, -50), (g, -80), (g, -120), (g, -150), (g, -180)],
             [1, 2, 3], [0.30, 0.65], "RCA")
    b.vessel([(18, 12), (26, 21), (35, 30)], [5], [], "LM", jitter=1.5)
    lm = b.start_angles(5)
    b.vessel([lm, (43, 18), (56, 6), (80, 2), (110, 0), (140, -3), (160, -8)],
             [6, 7, 8], [0.27, 0.62], "LAD", parent=5)
    b.vessel([lm, (40, 48), (g, 67), (g, 95), (g, 120), (g, 140)],
             [11, 13], [0.42], "LCx", parent=5)
    b.vessel(_branch(b.start_angles(6), [(10, 15), (28, 33), (42, 42)]), [9], [], "LAD", parent=6)
    b.vessel(_branch(b.start_angles(7), [(8, 12), (20, 24), (30, 30)]), [10], [], "LAD", parent=7)
    b.vessel(_branch(b.start_angles(11), [(12, 5), (30, 9), (50, 12)]), [12], [], "LCx", parent=11)
    b.vessel(_branch(b.start_angles(13, 0.5), [(12, 4), (30, 7), (45, 9)]), [14], [], "LCx",
             parent=13, at=0.5)
    crux = b.start_angles(3)
    b.vessel(_branch(crux, [(25, 0), (50, -1), (72, -3)]), [4], [], "RCA", parent=3)
    b.vessel(_branch(crux, [(6, -14), (20, -20), (30, -15 if with_lplb else -25)]), [16], [],
             "RCA", parent=3)
    if with_ramus:
        b.vessel(_branch(lm, [(11, 4), (30, 12), (55, 20)]), [17], [], "LCx", parent=5,
                 jitter=1.5)
    if with_lplb:
        b.vessel(_branch(b.start_angles(13), [(12, 0), (25, -2), (35, -3)]), [18], [], "LCx",
                 parent=13)
    segments = {}
    for segment_id in sorted(b.paths):
        points, arc, radius = b.paths[segment_id]
        for array in (points, arc, radius):
            array.setflags(write=False)
        segments[segment_id] = SegmentPath(segment_id, points, arc, radius,
                                           tuple(b.branches.get(segment_id, ())),
                                           b.parents[segment_id], b.clearance.get(segment_id, 0.0))
    return TreeLayout(segments, b.centre, b.axes, b.radius, b.radius - FAT_GAP_MM)
