"""report.json: an :class:`~explain.report.Explanation` as plain JSON (docs/report-format.md)."""

from __future__ import annotations

import json
import math

import numpy as np

__all__ = ["FORMAT", "explanation_dict", "dumps", "peak_dict"]

FORMAT = "culprit-lens-report/1"

FILES = {
    "report": "report.json",
    "table": "segments.csv",
    "attributions": "attributions.npz",
    "html": "report.html",
}


def _plain(value):
    """Numbers, arrays and tuples as JSON-ready Python; NaN and infinities become None."""
    if isinstance(value, dict):
        return {str(k): _plain(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_plain(v) for v in value]
    if isinstance(value, np.ndarray):
        return _plain(value.tolist())
    if isinstance(value, (bool, np.bool_)):
        return bool(value)
    if isinstance(value, (int, np.integer)):
        return int(value)
    if isinstance(value, (float, np.floating)):
        value = float(value)
        return value if math.isfinite(value) else None
    return value


def peak_dict(location):
    """The peak of one map as a dict (see docs/report-format.md), or None."""
    peak = location.peak
    if peak is None:
        return None
    return {"arc_mm": peak.arc_mm, "xyz_mm": list(peak.xyz_mm), "voxel": list(peak.voxel),
            "value": peak.value, "cross_section": peak.index, "pixel": [peak.row, peak.col],
            "pixel_value": peak.pixel_value, "voxel_inside_image": peak.inside_image}


def _image_dict(image):
    return {"size": list(image.GetSize()), "spacing_mm": list(image.GetSpacing()),
            "origin_mm": list(image.GetOrigin()), "direction": list(image.GetDirection())}


def _reference_dict(reference):
    if reference is None:
        return None
    return {"grade": reference.grade,
            "stenosis_percent": {str(k): v for k, v in sorted(reference.stenosis_percent.items())},
            "lesions": [{"segment": les.segment, "start_mm": les.start_mm, "end_mm": les.end_mm}
                        for les in reference.lesions],
            "has_lesion_mask": reference.lesion_mask is not None}


def overlay_files(methods):
    """Overlay file names, relative to the output folder."""
    return {**{m: f"overlays/{m}.nii.gz" for m in methods}, "coverage": "overlays/coverage.nii.gz",
            "culprit": "overlays/culprit.nii.gz"}


def explanation_dict(explanation, *, figures=()):
    """The report as a dict; ``figures`` lists the figure files written (relative paths)."""
    e = explanation
    culprit = e.culprit
    where = {m: {**(peak_dict(culprit.locations[m]) or {"arc_mm": None}),
                 "extent_mm": culprit.locations[m].extent_mm} for m in e.methods}
    segments = []
    for s in e.segments:
        segments.append({
            "id": s.id, "abbr": s.abbr, "name": s.name, "territory": s.territory,
            "length_mm": s.length_mm, "winning_channels": list(s.winning_channels),
            "gradient": s.gradient, "leave_one_out": s.leave_one_out, "shapley": s.shapley,
            "shapley_stderr": s.shapley_stderr,
            "reference_stenosis_percent": s.reference_stenosis_percent,
            "peaks": {m: peak_dict(s.locations[m]) for m in e.methods},
            "extent_mm": {m: s.locations[m].extent_mm for m in e.methods},
        })
    out = {
        "format": FORMAT,
        "case_id": e.case_id,
        "case": {"path": str(e.case.path), "segment_ids": [s.id for s in e.segments],
                 "image": _image_dict(e.case.image)},
        "model": dict(e.model),
        "settings": dict(e.settings),
        "prediction": dict(e.prediction),
        "target": dict(e.target),
        "culprit": {"segment_id": culprit.id, "segment_abbr": culprit.abbr,
                    "segment_name": culprit.name, "territory": culprit.territory,
                    "shapley": culprit.shapley, "margin": e.margin,
                    "tied_with": list(getattr(e, "tied_with", ())), "where": where},
        "segments": segments,
        "reference": _reference_dict(getattr(e.case, "reference", None)),
        "files": {**FILES, "overlays": overlay_files(e.methods), "figures": list(figures)},
        "cautions": list(e.cautions),
        "notes": list(e.notes),
        "warnings": list(getattr(e, "warnings", ())),
    }
    return _plain(out)


def dumps(report):
    """JSON text of a report dict (strict JSON: no NaN)."""
    return json.dumps(report, indent=2, allow_nan=False) + "\n"
