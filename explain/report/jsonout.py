"""report.json: an :class:`~explain.report.Explanation` as plain JSON (docs/report-format.md)."""

from __future__ import annotations

import json
import math

import numpy as np

from ..attribution.trace import LOW_MARGIN_FRACTION, culprit_doubts
from .wording import culprit_statement

__all__ = ["FORMAT", "explanation_dict", "dumps", "peak_dict", "doubts_of"]

FORMAT = "culprit-lens-report/2"

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


def low_margin_fraction(explanation):
    """The ``low_margin`` share in force: the quality settings', else the trace's default."""
    quality = getattr(explanation, "quality", None)
    if quality is None:
        return LOW_MARGIN_FRACTION
    return float(quality.settings.flag_thresholds["low_margin"])


def doubts_of(explanation):
    """The culprit's doubts by the one rule, :func:`explain.attribution.trace.culprit_doubts`."""
    e = explanation
    if e.target.get("value_all") is None or e.target.get("value_none") is None:
        return ()
    return culprit_doubts([s.shapley for s in e.segments], e.margin, e.target["value_all"],
                          e.target["value_none"], fraction=low_margin_fraction(e))


def explanation_dict(explanation, *, figures=(), dicom=None):
    """The report as a dict; ``figures`` lists the figure files written (relative paths),
    ``dicom`` is the :class:`~explain.report.dicom.DicomOutput` of the DICOM objects, if any
    were asked for (its files are listed, its notes added)."""
    e = explanation
    culprit = e.culprit
    where = {m: {**(peak_dict(culprit.locations[m]) or {"arc_mm": None}),
                 "extent_mm": culprit.locations[m].extent_mm} for m in e.methods}
    doubts = doubts_of(e)
    segments = []
    for s in e.segments:
        segments.append({
            "id": s.id, "abbr": s.abbr, "name": s.name, "territory": s.territory,
            "length_mm": s.length_mm, "winning_channels": list(s.winning_channels),
            "gradient_x_feature": s.gradient_x_feature, "leave_one_out": s.leave_one_out,
            "shapley": s.shapley,
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
                    "tied_with": list(getattr(e, "tied_with", ())), "where": where,
                    "doubts": list(doubts),
                    "statement": culprit_statement(culprit.label, doubts,
                                                   low_margin=low_margin_fraction(e))},
        "segments": segments,
        "reference": _reference_dict(getattr(e.case, "reference", None)),
        "files": {**FILES, "overlays": overlay_files(e.methods), "figures": list(figures),
                  "dicom": [] if dicom is None else list(dicom.files)},
        "cautions": list(e.cautions),
        "notes": list(e.notes) + ([] if dicom is None else list(dicom.notes)),
        "warnings": list(getattr(e, "warnings", ())),
    }
    if getattr(e, "quality", None) is not None:
        out["quality"] = e.quality.to_dict()
    return _plain(out)


def dumps(report):
    """JSON text of a report dict (strict JSON: no NaN)."""
    return json.dumps(report, indent=2, allow_nan=False) + "\n"
