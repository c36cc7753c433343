"""One synthetic case in memory: the tree, its lesions, the rendered volume and the reference.

Randomness comes from the seed alone, split into independent streams (anatomy, tissue values,
noise, one per lesion), so the same seed and lesions give identical arrays, and a lesion given
by hand does not move the anatomy.
"""

from __future__ import annotations

import numbers
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import SimpleITK as sitk

from ..anatomy import segment_info
from ..case import Case, Lesion, Reference, Segment
from ..errors import InputError
from ..geometry import Centerline
from ..grading import cadrads_category
from .layout import NEVER_DRAWN, OPTIONAL_SEGMENTS, TreeLayout, make_layout
from .lesions import LesionSpec, lesion_profile, parse_lesion, place_lesion, remodelling_radius
from .render import Grid, Tube, render_volume, sphere_background
from .tissue import BLUR_SIGMA_MM, FAT_HU, LUMEN_HU, LUMEN_SD_HU, MYOCARDIUM_HU, NOISE_SD_HU

__all__ = ["PhantomCase", "make_phantom", "check_seed"]

DEFAULT_SPACING_MM = 0.45
_STREAM_ANATOMY, _STREAM_TISSUE, _STREAM_NOISE, _STREAM_LESION = 0, 1, 2, 3


@dataclass(frozen=True)
class PhantomCase:
    """A synthetic CCTA case in memory.

    Attributes
    ----------
    case_id : str
    seed : int
    image : SimpleITK.Image
        float32 HU (whole numbers), isotropic voxels, non-zero origin, LPS physical space.
    centerlines : dict of int to (n, 3) float64
        Per SCCT segment, mm, physical space, proximal to distal, about 0.5 mm apart.
    radius_mm : dict of int to (n,) float64
        Lumen radius at each centerline point (narrowed at lesions, 0 where occluded).
    healthy_radius_mm : dict of int to (n,) float64
        Lumen radius the segment would have without lesions.
    reference : dict
        ``grade`` (CAD-RADS 2.0 string), ``stenosis_percent`` ({segment id: percent}, every
        segment), ``lesions`` (list of ``{"segment", "start_mm", "end_mm"}``, arc mm).
    lesion_mask : SimpleITK.Image
        uint8, same grid as ``image``: 1 + lesion index inside the lesion's outer wall, else 0.
    lesions : tuple of PlacedLesion
    tissue : dict
        HU and mm values drawn for this case (lumen, fat, myocardium, noise sd, blur sigma).
    layout : TreeLayout
    """

    case_id: str
    seed: int
    image: sitk.Image = field(repr=False)
    centerlines: dict = field(repr=False)
    radius_mm: dict = field(repr=False)
    healthy_radius_mm: dict = field(repr=False)
    reference: dict = field(repr=False)
    lesion_mask: sitk.Image = field(repr=False)
    lesions: tuple = field(repr=False)
    tissue: dict = field(repr=False)
    layout: TreeLayout = field(repr=False)

    @property
    def segment_ids(self):
        return tuple(sorted(self.centerlines))

    def to_case(self, *, ramus_territory="LCx"):
        """The same case as :func:`explain.case.load_case` would give after writing it, without
        the disk (centerlines not rounded to 0.1 micrometre as in the CSVs).

        Returns
        -------
        explain.case.Case
            ``path`` and each segment's ``source`` name where the files would be
            (``<case_id>/case.json``, ``centerlines/seg<ID>.csv``), relative.
        """
        segments = []
        for segment_id in self.segment_ids:
            info = segment_info(segment_id, ramus_territory=ramus_territory)
            segments.append(Segment(info.id, info.abbr, info.name, info.territory,
                                    Centerline(self.centerlines[segment_id]),
                                    np.array(self.radius_mm[segment_id]),
                                    Path(f"centerlines/seg{segment_id}.csv")))
        ref = self.reference
        reference = Reference(ref["grade"], dict(ref["stenosis_percent"]),
                              tuple(Lesion(l["segment"], l["start_mm"], l["end_mm"])
                                    for l in ref["lesions"]),
                              sitk.Cast(self.lesion_mask, sitk.sitkFloat32))
        return Case(self.case_id, Path(self.case_id) / "case.json", self.image, tuple(segments),
                    reference, ())

    def __repr__(self):
        size = "x".join(str(n) for n in self.image.GetSize())
        lesions = ", ".join(f"{p.summary()} {p.start_mm:.1f}-{p.end_mm:.1f} mm" for p in self.lesions)
        return (f"PhantomCase({self.case_id!r}, seed={self.seed}, image {size} voxels of "
                f"{self.image.GetSpacing()[0]:.3g} mm, segments={list(self.segment_ids)}, "
                f"grade={self.reference['grade']!r}, lesions=[{lesions}])")


def check_seed(seed, *, field="seed"):
    """Return ``seed`` as an int >= 0, or raise :class:`InputError`."""
    if isinstance(seed, bool) or not isinstance(seed, numbers.Integral) or seed < 0:
        raise InputError(f"{field}: expected a whole number >= 0, got {seed!r}")
    return int(seed)


def _as_specs(lesions):
    if lesions is None:
        return ()
    if isinstance(lesions, (str, LesionSpec)):
        lesions = [lesions]
    specs = []
    for item in lesions:
        if isinstance(item, str):
            specs.append(parse_lesion(item))
        elif isinstance(item, LesionSpec):
            specs.append(item)
        else:
            raise InputError(f"lesions: expected LesionSpec or 'ID:PERCENT[:calcified|soft]' "
                             f"text, got {type(item).__name__}")
    return tuple(specs)


def _tube(path, placed, labels):
    """The wall and lumen tubes of one segment with its lesions applied."""
    r0 = np.asarray(path.radius_mm)
    arc = np.asarray(path.arc_mm)
    if not placed:
        return Tube(path.points_mm, r0, path.points_mm, r0, arc, np.zeros_like(r0)), r0
    profiles = np.stack([lesion_profile(arc, p.start_mm, p.end_mm) for p in placed])
    narrowing = profiles * np.array([p.percent / 100.0 for p in placed])[:, None]
    lead = np.argmax(narrowing, axis=0)
    rows = np.arange(len(arc))
    lumen = r0 * (1.0 - narrowing[lead, rows])
    wall = remodelling_radius(r0, profiles.max(axis=0))
    frames = Centerline(path.points_mm).frames()
    angle = np.radians([p.angle_deg for p in placed])[lead]
    side = np.cos(angle)[:, None] * frames[:, 1] + np.sin(angle)[:, None] * frames[:, 2]
    eccentric = np.array([p.eccentric for p in placed], dtype=float)[lead]
    lumen_points = path.points_mm + ((r0 - lumen) * eccentric)[:, None] * side
    # an eccentric lesion bulges outwards on its plaque side only: the outer wall stays on the
    # original wall where the lumen touches it, so the plaque is a crescent, not a ring
    wall_points = path.points_mm - ((wall - r0) * eccentric)[:, None] * side
    # plaque HU: the lesion that dominates each point; outside all lesions, the nearest one's
    nearest = np.argmin(np.stack([np.abs(arc - p.centre_mm) for p in placed]), axis=0)
    owner = np.where(profiles.max(axis=0) > 0, np.argmax(profiles, axis=0), nearest)
    plaque_hu = np.array([p.plaque_hu for p in placed])[owner]
    extents = tuple((p.start_mm, p.end_mm, label) for p, label in zip(placed, labels))
    return Tube(wall_points, wall, lumen_points, lumen, arc, plaque_hu, extents), lumen


def make_phantom(*, seed=0, lesions=None, case_id=None, spacing_mm=DEFAULT_SPACING_MM,
                 direction=None, variation=1.0, noise_sd_hu=None, blur_sigma_mm=BLUR_SIGMA_MM):
    """Make one synthetic CCTA case in memory.

    Parameters
    ----------
    seed : int
        Everything random follows from it.
    lesions : sequence of LesionSpec or str, optional
        Lesions to draw (``"ID:PERCENT[:calcified|soft]"`` text is parsed); none by default.
    case_id : str, optional
        Default ``"phantom-<seed>"``.
    spacing_mm : float
        Isotropic voxel size, mm (0.45 by default; coarser only for quick tests).
    direction : (3, 3) array, optional
        Orthonormal direction matrix of the image (columns = axis directions); identity by default.
    variation : float
        Scale of the anatomical randomness (0: nominal tree and tissue values).
    noise_sd_hu : float, optional
        Noise standard deviation; by default drawn from 20-30 HU by the seed. 0 for none.
    blur_sigma_mm : float
        Gaussian partial-volume blur, mm; 0 for none.

    Returns
    -------
    PhantomCase

    Raises
    ------
    InputError
        Bad seed, bad lesion text, a lesion on a segment the phantom does not draw.
    """
    seed = check_seed(seed)
    specs = _as_specs(lesions)
    direction = _check_options(specs, spacing_mm, direction, variation, noise_sd_hu, blur_sigma_mm)
    wanted = tuple(s.segment for s in specs if s.segment in OPTIONAL_SEGMENTS)
    layout = make_layout(np.random.default_rng([seed, _STREAM_ANATOMY]), variation=variation,
                         include=wanted)
    tissue = _tissue(np.random.default_rng([seed, _STREAM_TISSUE]), variation, noise_sd_hu,
                     blur_sigma_mm)
    placed = [place_lesion(spec, layout.segments[spec.segment],
                           np.random.default_rng([seed, _STREAM_LESION, n]))
              for n, spec in enumerate(specs)]
    tubes, radius, healthy = _draw_tubes(layout, placed)
    points = np.concatenate([p.points_mm for p in layout.segments.values()])
    grid = Grid.around(points, spacing=float(spacing_mm), margin_mm=6.0, direction=direction)
    background = sphere_background(grid, layout.centre_mm, layout.myocardium_radius_mm,
                                   inside_hu=tissue["myocardium_hu"], outside_hu=tissue["fat_hu"])
    hu, mask = render_volume(grid, tubes, lumen_hu=tissue["lumen_hu"], background_hu=background,
                             blur_sigma_mm=float(blur_sigma_mm), noise_sd_hu=tissue["noise_sd_hu"],
                             rng=np.random.default_rng([seed, _STREAM_NOISE]))
    centerlines = {i: np.asarray(p.points_mm) for i, p in layout.segments.items()}
    return PhantomCase(case_id or f"phantom-{seed}", seed, _image(hu, grid), centerlines, radius,
                       healthy, _reference(layout, placed), _image(mask, grid), tuple(placed),
                       tissue, layout)


def _check_options(specs, spacing_mm, direction, variation, noise_sd_hu, blur_sigma_mm):
    """make_phantom's option checks; returns the direction as an array (or None)."""
    if not (isinstance(spacing_mm, numbers.Real) and 0.2 <= float(spacing_mm) <= 2.0):
        raise InputError(f"spacing_mm: expected a voxel size of 0.2-2.0 mm, got {spacing_mm!r}")
    for name, value, top in (("variation", variation, 2.0), ("blur_sigma_mm", blur_sigma_mm, 2.0),
                             ("noise_sd_hu", 0.0 if noise_sd_hu is None else noise_sd_hu, 500.0)):
        if isinstance(value, bool) or not isinstance(value, numbers.Real) or not 0.0 <= value <= top:
            raise InputError(f"{name}: expected a number from 0 to {top:g}, got {value!r}")
    if direction is not None:
        direction = np.asarray(direction, dtype=np.float64)
        if direction.shape != (3, 3) or not np.allclose(direction.T @ direction, np.eye(3), atol=1e-6):
            raise InputError("direction: expected an orthonormal 3 x 3 matrix (columns = axis "
                             "directions in LPS)")
    for spec in specs:
        if spec.segment in NEVER_DRAWN:
            raise InputError(f"lesion {spec}: segment {spec.segment} "
                             f"({segment_info(spec.segment).abbr}) is not drawn in phantoms "
                             "(their trees are right-dominant); choose another segment")
    return direction


def _tissue(rng, variation, noise_sd_hu, blur_sigma_mm):
    """Tissue HU, noise and blur of one phantom (four uniform draws from ``rng``)."""
    u = rng.uniform(size=4)
    return {
        "lumen_hu": round(float(LUMEN_HU + 0.5 * LUMEN_SD_HU * variation * (2 * u[0] - 1)), 1),
        "fat_hu": round(float(FAT_HU + 5.0 * variation * (2 * u[1] - 1)), 1),
        "myocardium_hu": round(float(np.interp(u[2], [0, 1], MYOCARDIUM_HU)), 1),
        "noise_sd_hu": round(float(np.interp(u[3], [0, 1], NOISE_SD_HU)), 1)
        if noise_sd_hu is None else float(noise_sd_hu),
        "blur_sigma_mm": float(blur_sigma_mm),
    }


def _draw_tubes(layout, placed):
    """Tubes to render, lumen radius per centerline point and healthy radius, per segment."""
    tubes, radius, healthy = [], {}, {}
    for segment_id, path in layout.segments.items():
        mine = [(p, n + 1) for n, p in enumerate(placed) if p.segment == segment_id]
        tube, lumen = _tube(path, [p for p, _ in mine], [label for _, label in mine])
        tubes.append(tube)
        radius[segment_id] = lumen
        healthy[segment_id] = np.asarray(path.radius_mm)
    return tubes, radius, healthy


def _reference(layout, placed):
    """The phantom's reference: CAD-RADS grade, stenosis per segment, lesion stretches."""
    stenosis = {segment_id: 0.0 for segment_id in layout.segments}
    for p in placed:
        stenosis[p.segment] = max(stenosis[p.segment], p.percent)
    return {
        "grade": cadrads_category(stenosis, plaque=bool(placed)),
        "stenosis_percent": stenosis,
        "lesions": [{"segment": p.segment, "start_mm": p.start_mm, "end_mm": p.end_mm}
                    for p in placed],
    }


def _image(array, grid):
    image = sitk.GetImageFromArray(array)
    image.SetOrigin(tuple(float(v) for v in grid.origin))
    image.SetSpacing((grid.spacing,) * 3)
    image.SetDirection(tuple(float(v) for v in grid.direction.reshape(-1)))
    return image
