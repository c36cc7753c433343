"""Every output file of an explanation, written into one (staging) folder."""

from __future__ import annotations

from pathlib import Path

import numpy as np

from ..geometry import place
from ..io import check_output_dir, write_image, write_text
from ..mapping import coverage, coverage_box, curve_lumen_label, overlay_box
from .figures import write_figures
from .html import report_html
from .jsonout import dumps, explanation_dict, overlay_files
from .nifti_stream import write_placed_nifti
from .tables import segments_csv

__all__ = ["check_out_dir", "write_into", "write_overlays", "overlay_volume", "overlay_volumes",
           "map_box", "map_volume", "write_attributions"]


def check_out_dir(out_dir, *, force=False, field="--out"):
    """Refuse an output folder before any work is done (see :func:`explain.io.check_output_dir`)."""
    return check_output_dir(out_dir, force=force, field=field)


def _say(progress, message):
    if progress is not None:
        progress(message)


def write_attributions(explanation, path):
    """attributions.npz: each method ``(S, N, H, W)`` float32, ``segment_ids`` (S,) int64,
    ``points_mm`` (S, N, H, W, 3) float32 and ``arc_mm`` (S, N) float32."""
    e = explanation
    arrays = {m: np.asarray(e.maps[m], dtype=np.float32) for m in e.methods}
    arrays["segment_ids"] = np.asarray(e.sections.segment_ids, dtype=np.int64)
    arrays["points_mm"] = np.stack([cs.points_mm for cs in e.sections.sections]).astype(np.float32)
    arrays["arc_mm"] = np.stack([cs.arc_mm for cs in e.sections.sections]).astype(np.float32)
    np.savez_compressed(path, **arrays)
    return path


def overlay_volume(explanation, key):
    """One overlay on the CT's grid: a method's map (float32, splatted into the vessels' bounding
    box and placed in the whole grid), ``"coverage"`` (float32 splat weight, 0 where no
    cross-section reached) or ``"culprit"`` (uint8 lumen label around the same smooth centerline
    that sampling follows)."""
    e = explanation
    image = e.case.image
    if key == "coverage":
        return coverage(e.sections.sections, like=image)
    if key == "culprit":
        seg = e.case.segment(e.culprit.id)
        return curve_lumen_label(image, seg.centerline, seg.radius_mm, label=e.culprit.id)
    return map_volume(e.maps[key], e.sections.sections, image)


def map_box(maps, sections, image):
    """One method's overlay splatted into the vessels' bounding box (a SplatBox)."""
    return overlay_box(list(maps), sections, like=image)


def map_volume(maps, sections, image):
    """One method's overlay: :func:`map_box` placed in the CT's grid (one scan-sized float32
    volume)."""
    return place(map_box(maps, sections, image), image)


def overlay_volumes(explanation):
    """Every overlay at once, keyed as :func:`overlay_volume` (the DICOM writer reuses them)."""
    return {key: overlay_volume(explanation, key) for key in overlay_files(explanation.methods)}


def _write_overlay(explanation, key, path):
    """One overlay file without a scan-sized volume: a method's map or the coverage streamed
    from the vessels' box (:func:`explain.report.nifti_stream.write_placed_nifti`); the culprit
    label (uint8) as a volume."""
    e = explanation
    image = e.case.image
    if key == "culprit":
        return write_image(overlay_volume(e, key), path)
    if key == "coverage":
        box = coverage_box(e.sections.sections, like=image)
        return write_placed_nifti(box.weight, box.start, image, path)
    box = map_box(e.maps[key], e.sections.sections, image)
    return write_placed_nifti(box.mean, box.start, image, path)


def write_overlays(explanation, folder, *, volumes=None):
    """overlays/<method>.nii.gz (maps in the CT's geometry), overlays/coverage.nii.gz and
    overlays/culprit.nii.gz. Without ``volumes``, streamed from the vessels' bounding box one
    file at a time (no scan-sized float32 volume is built)."""
    folder = Path(folder)
    names = overlay_files(explanation.methods)
    for key, name in names.items():
        if volumes is None:
            _write_overlay(explanation, key, folder / name)
        else:
            write_image(volumes[key], folder / name)
    return names


def _quality_figures(explanation, folder):
    """figures/faithfulness.png when the explanation was assessed with its model."""
    from .figures import FIGURE_DPI
    from .quality_figures import FAITHFULNESS_FIGURE, faithfulness_figure
    from .wording import target_unit

    quality = getattr(explanation, "quality", None)
    if quality is None or quality.faithfulness is None:
        return []
    fig = faithfulness_figure(quality.faithfulness, target_unit(explanation.target["label"]))
    fig.savefig(folder / FAITHFULNESS_FIGURE, dpi=FIGURE_DPI)
    return [f"figures/{FAITHFULNESS_FIGURE}"]


def _dicom_objects(explanation, folder, volumes, dicom, progress):
    """Write overlays/dicom/ when asked and possible; the DicomOutput (files and notes)."""
    from .dicom import DicomOutput, write_dicom

    if not dicom:
        return DicomOutput((), ("DICOM objects not written: turned off (--no-dicom)",))
    _say(progress, "writing DICOM objects (parametric maps, segmentation)")
    return write_dicom(explanation, explanation.case, folder, volumes=volumes)


def write_into(explanation, folder, *, progress=None, dicom=True):
    """Write report.json, segments.csv, attributions.npz, overlays, figures and report.html,
    and with ``dicom`` the DICOM objects of a DICOM case (:mod:`explain.report.dicom`).

    Returns
    -------
    Path
        report.html inside ``folder``.
    """
    folder = Path(folder)
    _say(progress, "writing overlays in the CT's geometry")
    write_overlays(explanation, folder)
    # the DICOM objects place each volume again, one at a time (memory over a second splat)
    written = _dicom_objects(explanation, folder, None, dicom, progress)
    write_attributions(explanation, folder / "attributions.npz")
    _say(progress, "drawing figures")
    figures = write_figures(explanation, folder / "figures")
    figures += _quality_figures(explanation, folder / "figures")
    report = explanation_dict(explanation, figures=figures, dicom=written)
    write_text(dumps(report), folder / "report.json")
    write_text(segments_csv(explanation), folder / "segments.csv")
    _say(progress, "writing report.html")
    html = report_html(report, {name: (folder / name).read_bytes() for name in figures})
    return write_text(html, folder / "report.html")
