"""A case: one CT angiography volume with the centerlines of its coronary segments.

The manifest ``case.json`` (format ``culprit-lens-case/1``) is described in
``docs/case-format.md``. :func:`load_case` reads it and validates everything a model or an
overlay will rely on, so that later steps never meet a half-valid case.
"""

from __future__ import annotations

import csv
import json
import math
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import SimpleITK as sitk

from .anatomy import check_segment_id, segment_info
from .errors import InputError
from .geometry.centerline import Centerline, distinct_rows
from .grading import CATEGORIES
from .io import read_image, read_volume, same_geometry

__all__ = ["CASE_FORMAT", "Lesion", "Reference", "Segment", "Case", "load_case", "read_centerline_csv"]

CASE_FORMAT = "culprit-lens-case/1"

# Lesion extents may overshoot the centerline by this much arc (mm) before they are refused:
# extents drawn by hand are rarely exact to the last point (common practice, no source).
_EXTENT_SLACK_MM = 0.5


@dataclass(frozen=True)
class Lesion:
    """A reference lesion on one segment, as arc lengths (mm) from its first centerline point."""

    segment: int
    start_mm: float
    end_mm: float

    @property
    def centre_mm(self):
        return 0.5 * (self.start_mm + self.end_mm)


@dataclass(frozen=True)
class Reference:
    """What is known about a case: its grade, stenoses, lesion extents and mask.

    ``lesion_mask`` holds only the bounding box of the mask's labelled voxels, placed in the
    CT's physical space (its origin is that of the box's first voxel).
    """

    grade: str | None
    stenosis_percent: dict
    lesions: tuple
    lesion_mask: sitk.Image | None = field(default=None, repr=False)


@dataclass(frozen=True)
class Segment:
    """One coronary segment of a case.

    Attributes
    ----------
    id, abbr, name, territory
        From the SCCT 2014 table (:mod:`explain.anatomy`).
    centerline : Centerline
        Points in mm, physical space of the image, proximal to distal.
    radius_mm : (n,) float64 or None
        Lumen radius per centerline point, mm, when the CSV has a ``radius`` column.
    source : Path
        The centerline CSV.
    n_outside : int
        Centerline points outside the image but within the tolerance.
    """

    id: int
    abbr: str
    name: str
    territory: str
    centerline: Centerline = field(repr=False)
    radius_mm: np.ndarray | None = field(repr=False)
    source: Path
    n_outside: int = 0

    def __repr__(self):
        return (f"Segment(id={self.id}, abbr={self.abbr!r}, territory={self.territory!r}, "
                f"points={len(self.centerline.points_mm)}, "
                f"length_mm={self.centerline.length_mm:.1f})")


@dataclass(frozen=True)
class Case:
    """A validated case; segments sorted by SCCT number.

    ``dicom`` is the :class:`explain.dicom_in.DicomSource` of a DICOM image (its identifiers
    for the DICOM output), None for an image file.
    """

    case_id: str
    path: Path
    image: sitk.Image = field(repr=False)
    segments: tuple
    reference: Reference | None
    notes: tuple = ()
    dicom: object = field(default=None, repr=False)

    @property
    def segment_ids(self):
        return tuple(s.id for s in self.segments)

    def segment(self, segment_id):
        """The segment with SCCT number ``segment_id``."""
        for s in self.segments:
            if s.id == segment_id:
                return s
        raise InputError(f"case {self.case_id}: no segment {segment_id}; it has {self.segment_ids}")

    def __repr__(self):
        size = "x".join(str(n) for n in self.image.GetSize())
        spacing = "x".join(f"{s:.3g}" for s in self.image.GetSpacing())
        return (f"Case({self.case_id!r}, image {size} voxels of {spacing} mm, "
                f"segments={list(self.segment_ids)}, reference={'yes' if self.reference else 'no'})")


def read_centerline_csv(path, *, field="centerline"):
    """Read a centerline CSV with header ``x,y,z`` and optional ``radius`` (mm).

    Returns
    -------
    points : (n, 3) float64, mm
    radius : (n,) float64, mm, or None
    """
    path = Path(path)
    if not path.is_file():
        raise InputError(f"{field}: centerline file {path} does not exist; check the path "
                         "(relative to the manifest's folder)")
    try:
        with path.open(newline="", encoding="utf-8") as handle:
            rows = list(csv.reader(handle))
    except (OSError, UnicodeDecodeError) as exc:
        raise InputError(f"{field}: cannot read {path}: {exc}") from None
    rows = [r for r in rows if any(cell.strip() for cell in r)]
    if not rows:
        raise InputError(f"{path}: empty; a centerline CSV needs the header x,y,z[,radius] and points")
    header = [h.strip().lower() for h in rows[0]]
    missing = [c for c in ("x", "y", "z") if c not in header]
    if missing:
        raise InputError(f"{path}: header {','.join(header)} lacks {','.join(missing)}; the header "
                         "must be x,y,z with optional radius (mm)")
    columns = ["x", "y", "z"] + (["radius"] if "radius" in header else [])
    where = [header.index(c) for c in columns]
    values = np.empty((len(rows) - 1, len(columns)), dtype=np.float64)
    for n, row in enumerate(rows[1:]):
        for m, index in enumerate(where):
            try:
                values[n, m] = float(row[index])
            except (IndexError, ValueError):
                cell = row[index] if index < len(row) else "<missing>"
                raise InputError(f"{path}: line {n + 2}, column {columns[m]}: expected a number "
                                 f"(mm), got {cell!r}") from None
    if not np.isfinite(values).all():
        line = int(np.nonzero(~np.isfinite(values).all(axis=1))[0][0]) + 2
        raise InputError(f"{path}: line {line} holds a NaN or infinite value; every coordinate "
                         "must be a finite number of mm")
    radius = values[:, 3].copy() if len(columns) == 4 else None
    if radius is not None and (radius < 0).any():
        raise InputError(f"{path}: radius must be >= 0 mm")
    return values[:, :3].copy(), radius


def _outside_mm(image, points):
    """How far (mm) each point lies outside the image's voxel extent (0 inside)."""
    origin = np.asarray(image.GetOrigin())
    spacing = np.asarray(image.GetSpacing())
    direction = np.asarray(image.GetDirection()).reshape(3, 3)
    index = np.linalg.solve(direction * spacing, (points - origin).T).T
    size = np.asarray(image.GetSize())
    below = np.clip(-0.5 - index, 0, None)
    above = np.clip(index - (size - 0.5), 0, None)
    return np.linalg.norm((below + above) * spacing, axis=1)


def _read_manifest(path):
    path = Path(path)
    if path.is_dir():
        path = path / "case.json"
    if not path.is_file():
        raise InputError(f"{path}: case manifest not found; pass a case.json or its folder")
    try:
        data = json.loads(path.read_text(encoding="utf-8"))
    except (json.JSONDecodeError, UnicodeDecodeError) as exc:
        raise InputError(f"{path}: not valid JSON ({exc}); fix the manifest") from None
    if not isinstance(data, dict):
        raise InputError(f"{path}: the manifest must be a JSON object")
    fmt = data.get("format")
    if fmt != CASE_FORMAT:
        raise InputError(f"{path}: field 'format' must be {CASE_FORMAT!r}, got {fmt!r}")
    for name, kind in (("case_id", str), ("image", str), ("segments", list)):
        if name not in data:
            raise InputError(f"{path}: missing field {name!r}; see docs/case-format.md")
        if not isinstance(data[name], kind):
            raise InputError(f"{path}: field {name!r} must be a {kind.__name__}, "
                             f"got {type(data[name]).__name__}")
    if not data["segments"]:
        raise InputError(f"{path}: field 'segments' is empty; a case needs at least one segment")
    return path, data


def _load_segments(path, data, image, *, ramus_territory, outside_tolerance_mm):
    segments, notes, seen = [], [], set()
    for n, entry in enumerate(data["segments"]):
        where = f"{path}: segments[{n}]"
        if not isinstance(entry, dict) or "id" not in entry or "centerline" not in entry:
            raise InputError(f"{where}: expected {{\"id\": <1-18>, \"centerline\": <CSV path>}}")
        segment_id = check_segment_id(entry["id"], field=f"{where}.id")
        if segment_id in seen:
            raise InputError(f"{where}.id: segment {segment_id} appears twice; list each once")
        seen.add(segment_id)
        csv_path = path.parent / str(entry["centerline"])
        points, radius = read_centerline_csv(csv_path, field=f"{where}.centerline")
        try:
            centerline = Centerline(points)
        except InputError as exc:
            raise InputError(f"{csv_path}: {exc}") from None
        if radius is not None:
            radius = radius[distinct_rows(points)]
        notes.extend(f"{csv_path.name}: {note}" for note in centerline.notes)
        outside = _outside_mm(image, centerline.points_mm)
        if outside.max() > outside_tolerance_mm:
            worst = int(outside.argmax())
            raise InputError(
                f"{csv_path}: point {worst + 1} lies {outside[worst]:.1f} mm outside the image "
                f"(tolerance {outside_tolerance_mm} mm); the centerline must be in the image's "
                "physical space (mm, LPS as SimpleITK reports it)")
        n_outside = int((outside > 0).sum())
        if n_outside:
            notes.append(f"{csv_path.name}: {n_outside} points lie just outside the image "
                         f"(within {outside_tolerance_mm} mm)")
        info = segment_info(segment_id, ramus_territory=ramus_territory)
        segments.append(Segment(info.id, info.abbr, info.name, info.territory, centerline,
                                radius, csv_path, n_outside))
    segments.sort(key=lambda s: s.id)
    return tuple(segments), notes


def _load_reference(path, data, image, segments):
    ref = data.get("reference")
    if ref is None:
        return None
    where = f"{path}: reference"
    if not isinstance(ref, dict):
        raise InputError(f"{where}: must be a JSON object")
    by_id = {s.id: s for s in segments}
    grade = ref.get("grade")
    if grade is not None:
        grade = str(grade).upper()
        if grade not in CATEGORIES + ("N",):
            raise InputError(f"{where}.grade: expected a CAD-RADS 2.0 category "
                             f"({', '.join(CATEGORIES)}, N), got {ref.get('grade')!r}")
    stenosis = {}
    raw = ref.get("stenosis_percent", {})
    if not isinstance(raw, dict):
        raise InputError(f"{where}.stenosis_percent: expected an object of segment id -> percent")
    for key, value in raw.items():
        segment_id = check_segment_id(key, field=f"{where}.stenosis_percent key")
        if not isinstance(value, (int, float)) or isinstance(value, bool) or not (
                math.isfinite(value) and 0 <= value <= 100):
            raise InputError(f"{where}.stenosis_percent[{key}]: expected a percent 0-100, got {value!r}")
        stenosis[segment_id] = float(value)
    lesions = []
    raw_lesions = ref.get("lesions") or []
    if not isinstance(raw_lesions, list):
        raise InputError(f"{where}.lesions: expected a list of {{\"segment\": id, \"start_mm\": a, "
                         f"\"end_mm\": b}}, got {type(raw_lesions).__name__}")
    for n, item in enumerate(raw_lesions):
        field_name = f"{where}.lesions[{n}]"
        try:
            segment_id = check_segment_id(item["segment"], field=f"{field_name}.segment")
            start, end = float(item["start_mm"]), float(item["end_mm"])
        except (KeyError, TypeError, ValueError, OverflowError):
            raise InputError(f"{field_name}: expected {{\"segment\": id, \"start_mm\": a, "
                             "\"end_mm\": b}") from None
        if segment_id not in by_id:
            raise InputError(f"{field_name}.segment: segment {segment_id} is not in the case's "
                             f"segments {sorted(by_id)}")
        length = by_id[segment_id].centerline.length_mm
        if not (math.isfinite(start) and math.isfinite(end)) or start < -_EXTENT_SLACK_MM or \
                end > length + _EXTENT_SLACK_MM or start >= end:
            raise InputError(f"{field_name}: extent [{start}, {end}] mm lies outside segment "
                             f"{segment_id} (arc 0 to {length:.1f} mm) or is empty; give "
                             "0 <= start_mm < end_mm <= segment length")
        lesions.append(Lesion(segment_id, start, end))
    mask = None
    if ref.get("lesion_mask") is not None:
        mask_path = path.parent / str(ref["lesion_mask"])
        mask = read_image(mask_path, field=f"{where}.lesion_mask")
        if not same_geometry(mask, image):
            raise InputError(f"{where}.lesion_mask: {mask_path} has another geometry than the "
                             "image (size, origin, spacing or direction differ); resample it "
                             "onto the CT grid")
        mask = _labelled_box(mask)
    return Reference(grade, stenosis, tuple(lesions), mask)


def _labelled_box(mask):
    """The mask cropped to the bounding box of its labelled (> 0) voxels, in the same physical
    space (SimpleITK ``RegionOfInterest`` keeps the geometry; an empty mask keeps one voxel).
    A full-size scan's mask is a scan-sized uint8 volume; the box is what the checks read."""
    labels = sitk.GetArrayViewFromImage(mask) > 0  # [k, j, i]
    if not labels.any():
        return sitk.RegionOfInterest(mask, [1, 1, 1], [0, 0, 0])
    lower, upper = [], []
    for axis in range(3):  # k, j, i
        hit = np.flatnonzero(labels.any(axis=tuple(a for a in range(3) if a != axis)))
        lower.append(int(hit[0]))
        upper.append(int(hit[-1]) + 1)
    start, stop = lower[::-1], upper[::-1]  # i, j, k
    return sitk.RegionOfInterest(mask, [b - a for a, b in zip(start, stop)], start)


def load_case(path, *, ramus_territory="LCx", outside_tolerance_mm=2.0):
    """Read and validate a case.

    Parameters
    ----------
    path : str or Path
        ``case.json`` or the folder that holds it.
    ramus_territory : {"LAD", "LCx"}
        Territory of the ramus intermedius (segment 17).
    outside_tolerance_mm : float
        Centerline points may lie this far outside the image (they are counted); farther is an
        error.

    Returns
    -------
    Case

    Raises
    ------
    InputError
        Naming the file or field at fault and what to do.
    """
    path, data = _read_manifest(path)
    image, dicom = _read_case_image(path, data)
    segments, notes = _load_segments(path, data, image, ramus_territory=ramus_territory,
                                     outside_tolerance_mm=outside_tolerance_mm)
    reference = _load_reference(path, data, image, segments)
    notes = [*(dicom.notes if dicom is not None else ()), *notes]
    return Case(data["case_id"], path, image, segments, reference, tuple(notes), dicom)


# -- DICOM input: the optional manifest field series_instance_uid ---------------------------------

def _read_case_image(path, data):
    """The CT and, for a DICOM folder, its :class:`~explain.dicom_in.DicomSource`."""
    series = data.get("series_instance_uid")
    if series is not None and not isinstance(series, str):
        raise InputError(f"{path}: field 'series_instance_uid' must be a string (a DICOM UID), "
                         f"got {type(series).__name__}")
    return read_volume(path.parent / data["image"], field=f"{path}: image",
                       series_instance_uid=series)
