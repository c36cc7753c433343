"""A DICOM CT series read from a folder: slices checked, sorted, rescaled to HU, identifiers kept.

The reader uses pydicom alone, so that every decision about the geometry is made here and can be
checked:

- files that are not DICOM, or DICOM without an image plane (a DICOMDIR, a report), are skipped;
- several series in one folder are refused with a list of them, unless one is chosen by its
  Series Instance UID (the manifest field ``series_instance_uid``);
- slices are sorted along the normal of their common orientation (the cross product of the two
  ImageOrientationPatient directions, DICOM PS3.3 C.7.6.2.1.1), so the volume's third axis is
  that normal and the direction matrix is right-handed;
- a gap larger than :data:`MISSING_GAP_FACTOR` times the typical one is a missing slice: an
  error; positions off an even grid by more than :data:`SPACING_TOLERANCE` of the spacing are
  an error, smaller deviations (beyond 1 micrometre) a note, and the volume takes the mean
  spacing;
- slices displaced within their plane from one to the next, or a non-zero GantryDetectorTilt,
  mean gantry tilt: an error (the volume would be sheared);
- stored values become HU per slice: HU = stored value x RescaleSlope + RescaleIntercept
  (DICOM PS3.3 C.11.1).

The identifiers the DICOM output needs (Study, Series, Frame of Reference UIDs and each slice's
SOP Instance UID, in volume order) travel with the image as a :class:`DicomSource`.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import SimpleITK as sitk

from .errors import InputError

__all__ = ["DicomSource", "read_dicom_series", "SPACING_TOLERANCE", "MISSING_GAP_FACTOR"]

#: Largest deviation of a slice from an even grid, as a fraction of the slice spacing, that is
#: accepted (with a note). Common practice, no source: a fiftieth of a slice is below what a
#: reader of the overlay could see.
SPACING_TOLERANCE = 0.02

#: A gap this many times the median gap between slices means slices are missing (common
#: practice, no source: halfway between one and two slice spacings).
MISSING_GAP_FACTOR = 1.5

_SAME_POSITION_MM = 1e-3    # slices closer than this along the normal are duplicates
_NOTE_MM = 1e-3             # deviations below this are rounding in the header, not worth a note


@dataclass(frozen=True)
class DicomSource:
    """Where a CT volume came from: the identifiers of its DICOM series.

    Attributes
    ----------
    folder : Path
    study_instance_uid, series_instance_uid : str
    frame_of_reference_uid : str or None
        None when the slices do not state one (DICOM output then cannot share it).
    sop_instance_uids : tuple of str
        One per slice, in volume order (index k of the image).
    positions_mm : (n_slices, 3) float64
        ImagePositionPatient of each slice, in volume order, mm (LPS, as in the files).
    orientation : (6,) float64
        The common ImageOrientationPatient (row direction, then column direction).
    files : tuple of Path
        The slice files, in volume order.
    headers : tuple of pydicom.Dataset
        The slices' headers without pixel data, in volume order (patient and study attributes
        for the DICOM output come from here and go nowhere else).
    notes : tuple of str
    """

    folder: Path
    study_instance_uid: str
    series_instance_uid: str
    frame_of_reference_uid: str | None
    sop_instance_uids: tuple
    positions_mm: np.ndarray = field(repr=False)
    orientation: np.ndarray = field(repr=False)
    files: tuple = field(repr=False)
    headers: tuple = field(repr=False)
    notes: tuple = ()

    def __repr__(self):
        return (f"DicomSource(series {self.series_instance_uid}, {len(self.sop_instance_uids)} "
                f"slices, frame of reference {self.frame_of_reference_uid})")


def _headers(folder):
    """(path, header) of every DICOM image slice in ``folder`` (not recursive), sorted by name."""
    import pydicom
    from pydicom.errors import InvalidDicomError

    found = []
    for path in sorted(p for p in Path(folder).iterdir() if p.is_file()):
        try:
            ds = pydicom.dcmread(path, stop_before_pixels=True)
        except (InvalidDicomError, OSError, EOFError, ValueError, TypeError):
            continue
        if "SeriesInstanceUID" in ds and "ImagePositionPatient" in ds and "Rows" in ds:
            found.append((path, ds))
    return found


def _choose_series(found, folder, field, series_instance_uid):
    by_series = {}
    for path, ds in found:
        by_series.setdefault(str(ds.SeriesInstanceUID), []).append((path, ds))
    if series_instance_uid is not None:
        chosen = by_series.get(str(series_instance_uid))
        if chosen is None:
            raise InputError(
                f"{field}: series_instance_uid {series_instance_uid} is not in {folder}; it "
                f"holds {_series_list(by_series)}; copy one of these UIDs into the manifest")
        return chosen
    if len(by_series) > 1:
        raise InputError(
            f"{field}: the folder {folder} holds {len(by_series)} DICOM series: "
            f"{_series_list(by_series)}; name one in the manifest field series_instance_uid "
            "(or keep one CT series per folder)")
    return next(iter(by_series.values()))


def _series_list(by_series):
    items = []
    for uid, slices in by_series.items():
        ds = slices[0][1]
        what = ", ".join(str(v) for v in (ds.get("Modality", ""), ds.get("SeriesDescription", ""))
                         if str(v))
        items.append(f"{uid} ({what + ', ' if what else ''}{len(slices)} slices)")
    return "; ".join(items)


def _common(slices, field, keyword, *, atol=None):
    """The value of ``keyword`` shared by every slice; an error naming the first that differs."""
    first = slices[0][1].get(keyword)
    for path, ds in slices[1:]:
        value = ds.get(keyword)
        same = (np.allclose(np.asarray(value, float), np.asarray(first, float), atol=atol)
                if atol is not None and value is not None and first is not None else value == first)
        if not same:
            raise InputError(f"{field}: {path.name} has {keyword} {value}, other slices {first}; "
                             "one series must share it (split the series or resample it)")
    if first is None:
        raise InputError(f"{field}: {slices[0][0].name} lacks {keyword}; a CT slice needs it")
    return first


def _check_frames(slices, field):
    for path, ds in slices:
        if int(ds.get("NumberOfFrames", 1) or 1) > 1:
            raise InputError(f"{field}: {path.name} is a multi-frame image; export the series "
                             "as one file per slice")
        if int(ds.get("SamplesPerPixel", 1)) != 1:
            raise InputError(f"{field}: {path.name} is not greyscale; a CT series is needed")


def _check_tilt(slices, positions, normal, field):
    tilts = [float(ds.get("GantryDetectorTilt", 0) or 0) for _, ds in slices]
    steps = np.diff(positions, axis=0)
    along = steps @ normal
    shear = np.linalg.norm(steps - along[:, None] * normal, axis=1)
    limit = max(_NOTE_MM, 0.01 * float(np.median(along))) if len(along) else _NOTE_MM
    if any(abs(t) > 1e-3 for t in tilts) or (shear > limit).any():
        worst = float(shear.max()) if len(shear) else 0.0
        raise InputError(
            f"{field}: gantry tilt (GantryDetectorTilt {max(tilts, key=abs):g} degrees, slices "
            f"displaced up to {worst:.3g} mm within their plane from one to the next); the "
            "volume would be sheared: reconstruct or resample the series without tilt")


def _spacing(offsets, slices, field):
    """Even slice spacing (mm) from the sorted offsets along the normal, and notes."""
    if len(offsets) == 1:
        ds = slices[0][1]
        thickness = ds.get("SpacingBetweenSlices") or ds.get("SliceThickness") or 1.0
        return float(thickness), [f"one slice only; its spacing is taken as {float(thickness):g} mm"]
    gaps = np.diff(offsets)
    if gaps.min() < _SAME_POSITION_MM:
        n = int(gaps.argmin())
        raise InputError(f"{field}: {slices[n][0].name} and {slices[n + 1][0].name} lie at the same "
                         "position (two phases or acquisitions?); keep one per series")
    typical = float(np.median(gaps))
    if gaps.max() > MISSING_GAP_FACTOR * typical:
        n = int(gaps.argmax())
        raise InputError(
            f"{field}: slices missing between {slices[n][0].name} and {slices[n + 1][0].name} "
            f"(gap {gaps[n]:.3g} mm, the others {typical:.3g} mm apart); supply the whole series")
    spacing = float((offsets[-1] - offsets[0]) / (len(offsets) - 1))
    off_grid = np.abs(offsets - (offsets[0] + spacing * np.arange(len(offsets)))).max()
    if off_grid > SPACING_TOLERANCE * spacing:
        raise InputError(
            f"{field}: uneven slice spacing (gaps {gaps.min():.4g} to {gaps.max():.4g} mm, a "
            f"slice {off_grid:.3g} mm off an even grid, more than {SPACING_TOLERANCE:.0%} of the "
            f"spacing); resample the series to even spacing")
    notes = []
    if off_grid > _NOTE_MM:
        notes.append(f"DICOM slices lie up to {off_grid:.3g} mm off an even grid (within the "
                     f"{SPACING_TOLERANCE:.0%} tolerance); the volume uses their mean spacing "
                     f"{spacing:.4g} mm")
    return spacing, notes


def _hu(path, field):
    """One slice's stored values rescaled to HU (DICOM PS3.3 C.11.1), float32 (rows, cols).

    Pixel data pydicom cannot decode (a compressed transfer syntax without its plugin) is
    decoded by SimpleITK's GDCM reader instead, which applies the same rescale.
    """
    import pydicom

    ds = pydicom.dcmread(path)
    try:
        stored = ds.pixel_array
    except Exception:  # noqa: BLE001 - pydicom raises many types for undecodable data
        return _hu_by_gdcm(path, ds, field)
    slope = float(ds.get("RescaleSlope", 1) or 1)
    intercept = float(ds.get("RescaleIntercept", 0) or 0)
    return (stored.astype(np.float64) * slope + intercept).astype(np.float32)


def _hu_by_gdcm(path, ds, field):
    try:
        values = sitk.GetArrayFromImage(sitk.ReadImage(str(path), sitk.sitkFloat32))
    except RuntimeError:
        raise InputError(f"{field}: cannot decode the pixel data of {path.name} (transfer syntax "
                         f"{ds.file_meta.get('TransferSyntaxUID', '?')}); convert the series to "
                         "uncompressed DICOM") from None
    return values.reshape(values.shape[-2:]).astype(np.float32)


def read_dicom_series(folder, *, field="image", series_instance_uid=None):
    """Read one DICOM CT series from a folder as a float32 HU image and its identifiers.

    Parameters
    ----------
    folder : str or Path
        A folder of single-frame DICOM slices (not searched recursively).
    field : str
        Where the folder came from, for error messages.
    series_instance_uid : str, optional
        The series to read when the folder holds several.

    Returns
    -------
    image : SimpleITK.Image
        float32 HU, index ``(i, j, k)`` = (column, row, slice in order along the normal).
    source : DicomSource

    Raises
    ------
    InputError
        No series, several without a choice, an unknown choice, inconsistent slices, missing
        slices, uneven spacing beyond the tolerance, gantry tilt, undecodable pixel data.
    """
    folder = Path(folder)
    found = _headers(folder)
    if not found:
        raise InputError(f"{field}: the folder {folder} holds no DICOM series; point to a folder "
                         "with one CT series or to a NIfTI/NRRD/MetaImage file")
    slices = _choose_series(found, folder, field, series_instance_uid)
    _check_frames(slices, field)
    rows, cols = int(_common(slices, field, "Rows")), int(_common(slices, field, "Columns"))
    pixel = np.asarray(_common(slices, field, "PixelSpacing", atol=1e-4), dtype=np.float64)
    orient = np.asarray(_common(slices, field, "ImageOrientationPatient", atol=1e-4), np.float64)
    row_dir, col_dir = orient[:3], orient[3:]
    normal = np.cross(row_dir, col_dir)
    positions = np.array([np.asarray(ds.ImagePositionPatient, np.float64) for _, ds in slices])
    order = np.argsort(positions @ normal, kind="stable")
    slices = [slices[n] for n in order]
    positions = positions[order]
    _check_tilt(slices, positions, normal, field)
    spacing, notes = _spacing(positions @ normal, slices, field)
    volume = np.empty((len(slices), rows, cols), dtype=np.float32)
    for k, (path, _) in enumerate(slices):
        volume[k] = _hu(path, field)
    image = sitk.GetImageFromArray(volume)
    # PixelSpacing is (between rows, between columns); index i runs along a row.
    image.SetSpacing((float(pixel[1]), float(pixel[0]), spacing))
    image.SetOrigin(tuple(float(v) for v in positions[0]))
    image.SetDirection(tuple(np.stack([row_dir, col_dir, normal], axis=1).ravel().tolist()))
    first = slices[0][1]
    source = DicomSource(
        folder=folder, study_instance_uid=str(first.get("StudyInstanceUID", "")),
        series_instance_uid=str(first.SeriesInstanceUID),
        frame_of_reference_uid=(str(first.FrameOfReferenceUID)
                                if "FrameOfReferenceUID" in first else None),
        sop_instance_uids=tuple(str(ds.SOPInstanceUID) for _, ds in slices),
        positions_mm=positions, orientation=orient, files=tuple(p for p, _ in slices),
        headers=tuple(ds for _, ds in slices), notes=tuple(notes))
    return image, source
