"""The DICOM Segmentation of an explanation: the culprit's lumen and the peak region of a map.

Two binary segments on the CT's grid (highdicom ``Segmentation``):

1. the culprit segment's lumen, the same voxels as ``overlays/culprit.nii.gz``, labelled with
   its SCCT 2014 number and abbreviation; property category "Anatomical Structure" and type
   "Lumen of artery" (SNOMED CT, from highdicom's code dictionaries), anatomic region the
   artery of its territory;
2. the peak region of the first method: the lumen along the culprit's centerline over that
   map's half-peak extent (:func:`explain.mapping.half_peak_extent`), with a radius of at
   least :data:`PEAK_MIN_RADIUS_MM` so that a region on a tight stenosis stays visible;
   category "Spatial and Relational Concept", type "Area of defined region" (SNOMED CT).
"""

from __future__ import annotations

import numpy as np
import SimpleITK as sitk

from ..mapping import DEFAULT_RADIUS_MM, lumen_label

__all__ = ["PEAK_MIN_RADIUS_MM", "region_masks", "segment_descriptions"]

#: Smallest radius of the peak region's tube, mm (common practice, no source: about two voxels
#: of a 0.45 mm CT, so a region on a narrowed lumen still shows as more than a line).
PEAK_MIN_RADIUS_MM = 1.0


def _territory_code(territory):
    from pydicom.sr.codedict import codes

    return {"LM": codes.SCT.LeftMainCoronaryArtery,
            "LAD": codes.SCT.LeftAnteriorDescendingCoronaryArtery,
            "LCx": codes.SCT.CircumflexCoronaryArtery,
            "RCA": codes.SCT.RightCoronaryArtery}.get(territory, codes.SCT.CoronaryArtery)


def _peak_region(like, segment, extent_mm):
    """uint8 mask of the lumen tube over ``extent_mm`` (start, end) of the segment's arc."""
    line = segment.centerline
    start, end = (float(v) for v in extent_mm)
    half_voxel = 0.5 * min(like.GetSpacing())
    if end - start < 2 * half_voxel:   # a one-cross-section run: give it a voxel's length
        centre = 0.5 * (start + end)
        start, end = centre - half_voxel, centre + half_voxel
    start, end = max(start, 0.0), min(end, float(line.length_mm))
    arc = np.linspace(start, end, max(2, int(np.ceil((end - start) / half_voxel)) + 1))
    points = np.asarray(line.position_at(arc), dtype=np.float64)
    radius = segment.radius_mm
    radius = (np.full(len(arc), DEFAULT_RADIUS_MM) if radius is None
              else np.interp(arc, line.arc_mm, radius))
    return lumen_label(like, points, np.maximum(radius, PEAK_MIN_RADIUS_MM), label=1)


def region_masks(explanation, culprit_label):
    """The segments' masks as ``(k, rows, cols, n_segments)`` bool, and notes.

    Parameters
    ----------
    explanation : explain.report.Explanation
    culprit_label : SimpleITK.Image
        The culprit's lumen label (``overlays/culprit.nii.gz``), uint8 on the CT's grid.

    Returns
    -------
    masks : (n_slices, rows, cols, 1 or 2) bool
        Second segment only when the first method's map has a peak on the culprit.
    method : str or None
        The method whose peak region is the second segment.
    extent_mm : (float, float) or None
    notes : list of str
    """
    e = explanation
    lumen = sitk.GetArrayViewFromImage(culprit_label) > 0
    method = e.methods[0] if e.methods else None
    extent = None if method is None else e.culprit.locations[method].extent_mm
    if extent is None:
        return lumen[..., None], None, None, [
            f"DICOM Segmentation: no peak region, the first method's map ({method}) has no "
            "positive attribution on the culprit"]
    region = _peak_region(e.case.image, e.case.segment(e.culprit.id), extent)
    return (np.stack([lumen, sitk.GetArrayViewFromImage(region) > 0], axis=-1), method,
            tuple(float(v) for v in extent), [])


def segment_descriptions(explanation, method, extent_mm, algorithm):
    """highdicom SegmentDescription of each segment (1: culprit lumen, 2: peak region)."""
    import highdicom as hd
    from pydicom.sr.codedict import codes

    c = explanation.culprit
    items = [hd.seg.SegmentDescription(
        segment_number=1, segment_label=f"culprit {c.id} ({c.abbr}) lumen",
        segmented_property_category=codes.SCT.AnatomicalStructure,
        segmented_property_type=codes.SCT.LumenOfArtery,
        algorithm_type=hd.seg.SegmentAlgorithmTypeValues.AUTOMATIC,
        algorithm_identification=algorithm,
        anatomic_regions=[_territory_code(c.territory)])]
    if method is not None:
        a, b = extent_mm
        items.append(hd.seg.SegmentDescription(
            segment_number=2, segment_label=f"peak region {method} {a:.1f}-{b:.1f} mm"[:64],
            segmented_property_category=codes.SCT.SpatialAndRelationalConcept,
            segmented_property_type=codes.SCT.AreaOfDefinedRegion,
            algorithm_type=hd.seg.SegmentAlgorithmTypeValues.AUTOMATIC,
            algorithm_identification=algorithm,
            anatomic_regions=[_territory_code(c.territory)]))
    return items
