"""DICOM objects of an explanation, in the CT's own frame of reference: ``overlays/dicom/``.

Written only when the case's CT was read from a DICOM series (its identifiers travel with the
case as :class:`explain.dicom_in.DicomSource`); built with highdicom:

- ``overlays/dicom/map-<method>.dcm``: one Parametric Map per method, one frame per CT slice
  (the overlay ``overlays/<method>.nii.gz``), stored as 16-bit integers whose Real World Value
  Mapping gives the map in the target's units (``value = stored x slope + intercept``, zero
  exactly representable), with a window that shows the map at once;
- ``overlays/dicom/culprit-regions.dcm``: one binary Segmentation with the culprit's lumen and
  the first method's peak region (:mod:`explain.report.dicom_regions`).

Each object gets a new Series Instance UID and keeps the source's Study Instance UID and Frame
of Reference UID; highdicom copies the patient and study attributes from the source slices, the
only place they go. UIDs are derived from the source series, the object, the settings and the
model (pydicom ``generate_uid`` with them as entropy), so the same explanation always gets the
same UIDs and a different one never does.
"""

from __future__ import annotations

import json
import os
import tempfile
import time
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import SimpleITK as sitk

from .. import __version__
from ..errors import InputError
from .wording import target_unit

__all__ = ["DICOM_FOLDER", "DicomOutput", "dicom_files", "write_dicom"]

DICOM_FOLDER = "overlays/dicom"
SEGMENTATION_NAME = "culprit-regions.dcm"
_SERIES_NUMBER = 9100           # ours, after any series a scanner numbers (common practice)
_MANUFACTURER = "culprit-lens"
_WINDOW_PERCENTILE = 99.5       # of the map's non-zero magnitudes (common practice, no source)
_UCUM = {"CAD-RADS categories": "{CAD-RADS category}", "target units": "{target unit}"}


@dataclass(frozen=True)
class DicomOutput:
    """What :func:`write_dicom` wrote: ``files`` relative to the output folder, ``notes``,
    and ``seconds`` it took."""

    files: tuple
    notes: tuple
    seconds: float = 0.0


def dicom_files(methods):
    """File names of the DICOM objects, relative to the output folder (a dict).

    >>> dicom_files(["gradient"])["gradient"]
    'overlays/dicom/map-gradient.dcm'
    """
    return {**{m: f"{DICOM_FOLDER}/map-{m}.dcm" for m in methods},
            "segmentation": f"{DICOM_FOLDER}/{SEGMENTATION_NAME}"}


#: Type 2 attributes of the Patient and General Study modules (DICOM PS3.3 C.7.1.1, C.7.2.1)
#: that highdicom copies from the source: present but empty when a source slice lacks them.
_TYPE2_COPIED = ("PatientName", "PatientID", "PatientBirthDate", "PatientSex", "StudyDate",
                 "StudyTime", "ReferringPhysicianName", "StudyID", "AccessionNumber")


def _source_headers(source):
    """The source slices' headers, with any missing type 2 attribute added empty (copies)."""
    import copy

    headers = list(source.headers)
    if all(k in ds for ds in headers for k in _TYPE2_COPIED):
        return headers
    headers = [copy.deepcopy(ds) for ds in headers]
    for ds in headers:
        for keyword in _TYPE2_COPIED:
            if keyword not in ds:
                setattr(ds, keyword, "")
    return headers


def _uid(explanation, source, *parts):
    from pydicom.uid import generate_uid

    e = explanation
    settings = json.dumps(e.settings, sort_keys=True, default=str)
    return str(generate_uid(entropy_srcs=[
        "culprit-lens", __version__, source.series_instance_uid, settings,
        str(e.model.get("name")), str(e.model.get("weights_hash")), *map(str, parts)]))


def _equipment():
    return dict(manufacturer=_MANUFACTURER, manufacturer_model_name=_MANUFACTURER,
                software_versions=__version__, device_serial_number="0")


def _geometry(source, image):
    """Per-frame plane positions (the source slices' ImagePositionPatient), orientation and
    pixel measures, as highdicom sequences."""
    import highdicom as hd

    spacing = image.GetSpacing()
    positions = [hd.PlanePositionSequence(hd.CoordinateSystemNames.PATIENT, [float(v) for v in p])
                 for p in source.positions_mm]
    orientation = hd.PlaneOrientationSequence(hd.CoordinateSystemNames.PATIENT,
                                              [float(v) for v in source.orientation])
    measures = hd.PixelMeasuresSequence(pixel_spacing=[float(spacing[1]), float(spacing[0])],
                                        slice_thickness=float(spacing[2]),
                                        spacing_between_slices=float(spacing[2]))
    return dict(plane_positions=positions, plane_orientation=orientation, pixel_measures=measures)


def _quantise(values, *, signed):
    """Map values to uint16 with zero exactly representable.

    Returns
    -------
    stored : uint16 array, like ``values``
    slope, intercept : float
        ``values ~ stored * slope + intercept`` to within ``slope / 2``.
    """
    top = float(np.abs(values).max()) if values.size else 0.0
    top = top if top > 0 else 1.0
    if signed:
        slope, zero = top / 32767.0, 32768
    else:
        slope, zero = top / 65535.0, 0
    stored = np.clip(np.rint(values / slope) + zero, 0, 65535).astype(np.uint16)
    return stored, slope, -zero * slope


def _window(values, slope, intercept, *, signed):
    """Window centre and width in stored values: 0..p (or -p..p for signed maps), p a high
    percentile of the non-zero magnitudes."""
    nonzero = np.abs(values[values != 0])
    top = float(np.percentile(nonzero, _WINDOW_PERCENTILE)) if nonzero.size else slope
    low, high = (-top if signed else 0.0), max(top, slope)
    low_s, high_s = (low - intercept) / slope, (high - intercept) / slope
    return 0.5 * (low_s + high_s), max(high_s - low_s, 2.0)


def _parametric_map(explanation, source, headers, method, volume, n):
    import highdicom as hd
    from highdicom.sr.coding import CodedConcept

    from .explanation import aggregate_of

    values = sitk.GetArrayViewFromImage(volume)
    signed = bool((values < 0).any())
    stored, slope, intercept = _quantise(values, signed=signed)
    unit_words = target_unit(explanation.target["label"])
    # UCUM annotations: "{...}" is a dimensionless unit with a name (UCUM 2.1, section 2.4).
    unit = CodedConcept(value=_UCUM.get(unit_words, "1"), scheme_designator="UCUM",
                        meaning=unit_words)
    mapping = hd.pm.RealWorldValueMapping(
        lut_label=method[:16],
        lut_explanation=f"{method} attribution to target {explanation.target['label']}, "
                        f"{unit_words}"[:64],
        unit=unit, value_range=(0, 65535), slope=slope, intercept=intercept)
    center, width = _window(values, slope, intercept, signed=signed and
                            aggregate_of(method) == "absolute")
    voi = hd.VOILUTTransformation(window_center=[center], window_width=[width],
                                  window_explanation=[f"{method} map"[:64]])
    return hd.pm.ParametricMap(
        source_images=headers, pixel_array=stored,
        series_instance_uid=_uid(explanation, source, "series", method),
        series_number=_SERIES_NUMBER + n, sop_instance_uid=_uid(explanation, source, "sop", method),
        instance_number=1, **_equipment(), contains_recognizable_visual_features=False,
        real_world_value_mappings=[mapping], voi_lut_transformations=[voi],
        content_description=f"culprit-lens {method}"[:64], content_label="SALIENCY",
        series_description=f"culprit-lens {method}"[:64], **_geometry(source, volume))


def _segmentation(explanation, source, headers, culprit_label):
    import highdicom as hd
    from pydicom.sr.codedict import codes

    from .dicom_regions import region_masks, segment_descriptions

    masks, method, extent, notes = region_masks(explanation, culprit_label)
    algorithm = hd.AlgorithmIdentificationSequence(
        name="culprit-lens", version=__version__, family=codes.cid7162.ArtificialIntelligence)
    seg = hd.seg.Segmentation(
        source_images=headers, pixel_array=masks,
        segmentation_type=hd.seg.SegmentationTypeValues.BINARY,
        segment_descriptions=segment_descriptions(explanation, method, extent, algorithm),
        series_instance_uid=_uid(explanation, source, "series", "segmentation"),
        series_number=_SERIES_NUMBER, sop_instance_uid=_uid(explanation, source, "sop", "seg"),
        instance_number=1, **_equipment(), content_label="CULPRIT",
        content_description=f"culprit-lens culprit {explanation.culprit.label}"[:64],
        series_description=f"culprit-lens culprit {explanation.culprit.label}"[:64],
        **_geometry(source, culprit_label))
    return seg, notes


def _save(dataset, path):
    """Write a DICOM file atomically (a temporary file beside it, then renamed).

    Content Creator's Name is type 2 in the Content Identification macro (PS3.3 C.10.9):
    present, empty here since software, not a person, made the object.
    """
    if "ContentCreatorName" not in dataset:
        dataset.ContentCreatorName = ""
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, name = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".dcm", dir=path.parent)
    os.close(fd)
    try:
        dataset.save_as(name, enforce_file_format=True)
        mask = os.umask(0)
        os.umask(mask)
        os.chmod(name, 0o666 & ~mask)
        os.replace(name, path)
    finally:
        if os.path.exists(name):
            os.unlink(name)


def _check_source(explanation, case):
    source = getattr(case, "dicom", None)
    if source is None:
        return None, ("no DICOM objects written: the case's CT is not a DICOM series (DICOM "
                      "output needs DICOM input, to share its frame of reference)")
    if not source.frame_of_reference_uid:
        return None, ("no DICOM objects written: the source series states no Frame of "
                      "Reference UID")
    if len(source.sop_instance_uids) != case.image.GetSize()[2]:
        raise InputError(f"case {case.case_id}: its DICOM source has "
                         f"{len(source.sop_instance_uids)} slices but the image "
                         f"{case.image.GetSize()[2]}; load the case again with load_case")
    return source, None


def _built(source, build):
    """``build()``, with highdicom's refusals of this series turned into an InputError."""
    try:
        return build()
    except (AttributeError, KeyError, TypeError, ValueError) as exc:
        raise InputError(
            f"{source.folder}: cannot build DICOM objects on this series "
            f"({type(exc).__name__}: {str(exc).splitlines()[0][:160]}); fix the series' "
            "headers, or turn the DICOM output off (--no-dicom)") from None


def write_dicom(explanation, case, out_dir, *, volumes=None):
    """Write the explanation's DICOM objects into ``out_dir/overlays/dicom/``.

    Parameters
    ----------
    explanation : explain.report.Explanation
    case : explain.case.Case
        The explained case; its ``dicom`` source gives the identifiers (nothing is written,
        and a note says so, when the CT was not a DICOM series).
    out_dir : str or Path
        The explanation's output folder.
    volumes : dict of str to SimpleITK.Image, optional
        The overlays already computed (method -> map, ``"culprit"`` -> lumen label), as
        :func:`explain.report.files.overlay_volumes` gives them; computed one at a time when
        absent, each freed once its object is saved.

    Returns
    -------
    DicomOutput
    """
    start = time.perf_counter()
    source, note = _check_source(explanation, case)
    if source is None:
        return DicomOutput((), (note,), 0.0)
    if volumes is None:  # one scan-sized volume at a time, each freed once its object is saved
        from .files import overlay_volume

        def volume_of(key):
            return overlay_volume(explanation, key)
    else:
        volume_of = volumes.__getitem__
    out_dir, names = Path(out_dir), dicom_files(explanation.methods)
    headers = _source_headers(source)
    for n, m in enumerate(explanation.methods, 1):
        dataset = _built(source, lambda: _parametric_map(explanation, source, headers, m,
                                                         volume_of(m), n))
        _save(dataset, out_dir / names[m])
        del dataset
    seg, notes = _built(source, lambda: _segmentation(explanation, source, headers,
                                                      volume_of("culprit")))
    _save(seg, out_dir / names["segmentation"])
    files = tuple(names[m] for m in explanation.methods) + (names["segmentation"],)
    return DicomOutput(files, tuple(notes), time.perf_counter() - start)
