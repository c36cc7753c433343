"""A phantom case on disk, in the culprit-lens case format (``docs/case-format.md``).

A case folder holds::

    case.json                 manifest (format "culprit-lens-case/1") with its reference
    image.nii.gz              the CT volume, int16 HU (or ct/, a DICOM CT series, one file
                              per slice, with ``image_format="dicom"``)
    lesion_mask.nii.gz        uint8 labels on the same grid (1 + lesion index, 0 elsewhere)
    centerlines/seg<ID>.csv   x,y,z,radius in mm (LPS, as SimpleITK reports it), proximal first
    phantom.json              how the case was made: seed, tissue values, every lesion choice

The folder is built beside its destination and renamed into place, so an error leaves nothing
half-written.
"""

from __future__ import annotations

import json
from pathlib import Path

import SimpleITK as sitk

from ..errors import InputError
from ..io import atomic_output_dir, write_image, write_text
from .build import make_phantom

__all__ = ["write_phantom_case", "write_case_files", "case_manifest", "GENERATOR",
           "IMAGE_FORMATS"]

GENERATOR = "culprit-lens phantom 1"
IMAGE_NAME = "image.nii.gz"
DICOM_FOLDER = "ct"
IMAGE_FORMATS = ("nifti", "dicom")
MASK_NAME = "lesion_mask.nii.gz"


def _centerline_name(segment_id):
    return f"centerlines/seg{segment_id}.csv"


def check_image_format(image_format):
    """``"nifti"`` or ``"dicom"``; anything else is an :class:`InputError`."""
    if image_format not in IMAGE_FORMATS:
        raise InputError(f"image_format: expected one of {', '.join(IMAGE_FORMATS)}, got "
                         f"{image_format!r}")
    return image_format


def case_manifest(case, *, series_instance_uid=None):
    """The ``case.json`` content of a :class:`~explain.phantom.build.PhantomCase` (a dict).

    With ``series_instance_uid`` the image is the DICOM folder ``ct/`` and the manifest names
    the series.
    """
    ref = case.reference
    image = {"image": IMAGE_NAME} if series_instance_uid is None else {
        "image": DICOM_FOLDER, "series_instance_uid": series_instance_uid}
    return {
        "format": "culprit-lens-case/1",
        "case_id": case.case_id,
        **image,
        "segments": [{"id": i, "centerline": _centerline_name(i)} for i in case.segment_ids],
        "reference": {
            "grade": ref["grade"],
            "stenosis_percent": {str(k): v for k, v in sorted(ref["stenosis_percent"].items())},
            "lesions": [dict(item) for item in ref["lesions"]],
            "lesion_mask": MASK_NAME,
        },
    }


def _provenance(case):
    return {
        "generator": GENERATOR,
        "seed": case.seed,
        "tissue": case.tissue,
        "spacing_mm": case.image.GetSpacing()[0],
        "lesions": [
            {"segment": p.segment, "percent": p.percent, "kind": p.kind, "start_mm": p.start_mm,
             "end_mm": p.end_mm, "eccentric": p.eccentric, "angle_deg": round(p.angle_deg, 3),
             "plaque_hu": p.plaque_hu, "label": n + 1}
            for n, p in enumerate(case.lesions)
        ],
        "note": "synthetic phantom, not patient data",
    }


def _centerline_csv(points, radius):
    rows = ["x,y,z,radius"]
    rows += [f"{x:.4f},{y:.4f},{z:.4f},{r:.4f}" for (x, y, z), r in zip(points, radius)]
    return "\n".join(rows) + "\n"


def write_case_files(case, folder, *, image_format="nifti"):
    """Write every file of ``case`` into ``folder`` (which must exist); return the case.json path.

    ``image_format`` ``"nifti"`` writes image.nii.gz, ``"dicom"`` the DICOM CT series ``ct/``.
    Not atomic by itself: callers write into a temporary folder (see :func:`write_phantom_case`).
    """
    folder = Path(folder)
    series = None
    if check_image_format(image_format) == "dicom":
        from .dicom_writer import write_ct_series

        series = write_ct_series(case.image, folder / DICOM_FOLDER, case_id=case.case_id,
                                 seed=case.seed)["series"]
    else:
        write_image(sitk.Cast(case.image, sitk.sitkInt16), folder / IMAGE_NAME)
    write_image(sitk.Cast(case.lesion_mask, sitk.sitkUInt8), folder / MASK_NAME)
    for segment_id in case.segment_ids:
        write_text(_centerline_csv(case.centerlines[segment_id], case.radius_mm[segment_id]),
                   folder / _centerline_name(segment_id))
    write_text(json.dumps(_provenance(case), indent=2) + "\n", folder / "phantom.json")
    manifest = case_manifest(case, series_instance_uid=series)
    return write_text(json.dumps(manifest, indent=2) + "\n", folder / "case.json")


def write_phantom_case(out_dir, *, seed=0, lesions=None, case_id=None, force=False,
                       image_format="nifti", **options):
    """Make one phantom case and write it as a case folder.

    Parameters
    ----------
    out_dir : str or Path
        The case folder to create (refused if it exists and is not empty, unless ``force``).
    seed : int
        Everything random follows from it.
    lesions : sequence of LesionSpec or "ID:PERCENT[:calcified|soft]" text, optional
    case_id : str, optional
        Default ``"phantom-<seed>"``.
    force : bool
        Replace an existing non-empty ``out_dir`` (only once the new case is complete).
    image_format : {"nifti", "dicom"}
        The CT as image.nii.gz, or as a DICOM CT series in ``ct/`` (invented identifiers,
        :mod:`explain.phantom.dicom_writer`).
    **options
        Passed to :func:`~explain.phantom.build.make_phantom` (``spacing_mm``, ``direction``,
        ``variation``, ``noise_sd_hu``, ``blur_sigma_mm``).

    Returns
    -------
    Path
        ``out_dir / "case.json"``.

    Raises
    ------
    InputError
        Bad options or lesion text, or ``out_dir`` not usable.
    """
    out_dir = Path(out_dir)
    check_image_format(image_format)
    case = make_phantom(seed=seed, lesions=lesions, case_id=case_id, **options)
    with atomic_output_dir(out_dir, force=force) as temp:
        write_case_files(case, temp, image_format=image_format)
    return out_dir / "case.json"

