"""Every output file of an explanation, written into one (staging) folder."""

from __future__ import annotations

from pathlib import Path

import numpy as np

from ..io import check_output_dir, write_image, write_text
from ..geometry import place
from ..mapping import lumen_label, overlay_box
from .figures import write_figures
from .html import report_html
from .jsonout import dumps, explanation_dict, overlay_files
from .tables import segments_csv

__all__ = ["check_out_dir", "write_into", "write_overlays", "write_overlay", "write_attributions"]


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


def write_overlay(maps, sections, image, path):
    """One overlay file: splatted into the vessels' bounding box, placed in the CT's grid only to
    be written, and freed before the next (one scan-sized float32 volume at a time)."""
    volume = place(overlay_box(list(maps), sections, like=image), image)
    write_image(volume, path)
    del volume
    return path


def write_overlays(explanation, folder):
    """overlays/<method>.nii.gz (maps in the CT's geometry) and overlays/culprit.nii.gz."""
    e = explanation
    folder = Path(folder)
    image = e.case.image
    names = overlay_files(e.methods)
    for method in e.methods:
        write_overlay(e.maps[method], e.sections.sections, image, folder / names[method])
    seg = e.case.segment(e.culprit.id)
    label = lumen_label(image, seg.centerline.points_mm, seg.radius_mm, label=e.culprit.id)
    write_image(label, folder / names["culprit"])
    return names


def write_into(explanation, folder, *, progress=None):
    """Write report.json, segments.csv, attributions.npz, overlays, figures and report.html.

    Returns
    -------
    Path
        report.html inside ``folder``.
    """
    folder = Path(folder)
    _say(progress, "writing overlays in the CT's geometry")
    write_overlays(explanation, folder)
    write_attributions(explanation, folder / "attributions.npz")
    _say(progress, "drawing figures")
    figures = write_figures(explanation, folder / "figures")
    report = explanation_dict(explanation, figures=figures)
    write_text(dumps(report), folder / "report.json")
    write_text(segments_csv(explanation), folder / "segments.csv")
    _say(progress, "writing report.html")
    html = report_html(report, {name: (folder / name).read_bytes() for name in figures})
    return write_text(html, folder / "report.html")
