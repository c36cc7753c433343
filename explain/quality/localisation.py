"""Localisation against the case's reference: does the explanation point at the known lesion?

Needs a case with a reference (``case.json``'s ``reference``): stenosis per segment for
``culprit_hit``, lesion extents (arc mm) for the pointing test and the peak error, and
optionally a lesion mask on the CT grid for the second pointing test and the lesion region.
"""

from __future__ import annotations

import numpy as np
import SimpleITK as sitk

from .array_metrics import relevance_mass_accuracy, relevance_rank_accuracy
from .regions import (attribution_for, lesion_arc_region, mask_region, method_aggregate,
                      radius_per_section)

__all__ = ["localisation", "reference_culprits"]


def reference_culprits(reference, segment_ids):
    """SCCT ids of the case's segments with the highest reference stenosis (all of a tie).

    Empty when the reference gives no stenosis above 0 for any of ``segment_ids``.

    Examples
    --------
    >>> from types import SimpleNamespace
    >>> reference_culprits(SimpleNamespace(stenosis_percent={6: 70.0, 7: 70.0, 1: 20.0}), (1, 6, 7))
    (6, 7)
    """
    stenosis = {int(k): float(v) for k, v in (reference.stenosis_percent or {}).items()
                if int(k) in segment_ids}
    if not stenosis or max(stenosis.values()) <= 0:
        return ()
    top = max(stenosis.values())
    return tuple(sorted(k for k, v in stenosis.items() if v == top))


def _mask_voxels_mm(mask, image):
    """The mask's voxels as ``(n, 3)`` float64 positions in mm on the CT's index grid
    (``[k, j, i]`` of ``image`` scaled by the CT spacing), or None for an empty mask.

    ``mask`` may be the whole grid or a box of it (:attr:`explain.case.Reference.lesion_mask`);
    only the mask's own voxels are kept: no scan-sized distance map is built."""
    inside = np.argwhere(sitk.GetArrayViewFromImage(mask) > 0)
    if not len(inside):
        return None
    start = image.TransformPhysicalPointToIndex(mask.GetOrigin())  # i, j, k of the box
    return (inside + np.asarray(start[::-1])) * np.asarray(image.GetSpacing()[::-1], np.float64)


def _mask_distance_mm(mask_mm, voxel, spacing):
    """Distance (mm) of voxel ``(i, j, k)`` to the nearest mask voxel (0 inside the mask): the
    Euclidean distance transform of the mask's complement at that voxel, with the CT spacing."""
    here = np.asarray(voxel[::-1], dtype=np.float64) * np.asarray(spacing[::-1], dtype=np.float64)
    return float(np.sqrt(((mask_mm - here) ** 2).sum(axis=1).min()))


def _pointing(location, lesions, mask, tolerance_mm):
    """(arc test, mask test, peak error mm) of one method's culprit peak."""
    peak = location.peak
    if peak is None or not lesions:
        return None, None, None
    gap = min(max(les.start_mm - peak.arc_mm, peak.arc_mm - les.end_mm, 0.0) for les in lesions)
    error = min(abs(peak.arc_mm - les.centre_mm) for les in lesions)
    by_mask = None
    if mask is not None and peak.inside_image:
        mask_mm, spacing = mask
        by_mask = bool(_mask_distance_mm(mask_mm, peak.voxel, spacing) <= tolerance_mm)
    return bool(gap <= tolerance_mm), by_mask, float(error)


def _lesion_regions(explanation, case, reference):
    """The lesion region on every segment's stack, and which construction gave it."""
    e = explanation
    by_id = {s.id: s for s in case.segments}
    regions = []
    if reference.lesion_mask is not None:
        for section in e.sections.sections:
            regions.append(mask_region(reference.lesion_mask, section.points_mm))
        return regions, "lesion_mask", None
    radius_from = set()
    for segment_id, section in zip(e.sections.segment_ids, e.sections.sections):
        extents = [(les.start_mm, les.end_mm) for les in reference.lesions
                   if les.segment == segment_id]
        radius, given = radius_per_section(by_id[segment_id], section.arc_mm)
        if extents:
            radius_from.add("centerline radius" if given else "default 1.5 mm")
        regions.append(lesion_arc_region(section.shape, section.pixel_mm, section.arc_mm,
                                         radius, extents))
    return regions, "lesion_extent_disc", " and ".join(sorted(radius_from)) or None


def localisation(explanation, case, *, tolerance_mm=3.0):
    """Compare an explanation with the case's reference lesions.

    Parameters
    ----------
    explanation : explain.report.Explanation
    case : explain.case.Case
        The explained case; its ``reference`` is used.
    tolerance_mm : float
        Pointing tolerance: mm of arc for the arc test, mm in the CT for the mask test.

    Returns
    -------
    dict or None
        None when the case has no reference. Otherwise ``culprit_hit`` (bool, or None without
        a stenosis above 0), ``reference_culprits`` (ids), and per method:
        ``pointing_hit`` (the culprit's peak within ``tolerance_mm`` of arc of a reference
        lesion's extent on the culprit; None without a peak or a lesion there),
        ``pointing_hit_mask`` (the peak voxel within ``tolerance_mm`` of the lesion mask,
        distance transform with the CT spacing; None without a mask), ``peak_error_mm`` (arc
        distance from the peak to the nearest lesion centre on the culprit),
        ``relevance_mass`` and ``relevance_rank`` (Arras et al. 2022, over all segments'
        stacks against the lesion region; None with a reason in ``reasons``), and ``region``:
        ``"lesion_mask"`` (the mask sampled onto the pixels, nearest neighbour) or
        ``"lesion_extent_disc"`` (lesion extents crossed with a disc of the lumen radius, or
        1.5 mm where the case gives none), with ``region_radius`` saying which
        (``"centerline radius"``, ``"default 1.5 mm"``; None with a mask).
    """
    from .settings import check_settings

    tolerance_mm = check_settings(tolerance_mm=tolerance_mm).tolerance_mm
    reference = getattr(case, "reference", None)
    if reference is None:
        return None
    e = explanation
    culprits = reference_culprits(reference, e.sections.segment_ids)
    lesions = [les for les in reference.lesions if les.segment == e.culprit.id]
    mask = None
    if reference.lesion_mask is not None:
        mask_mm = _mask_voxels_mm(reference.lesion_mask, case.image)
        mask = None if mask_mm is None else (mask_mm, case.image.GetSpacing())
    regions, region_kind, radius_from = _lesion_regions(e, case, reference)
    region = np.stack(regions)
    out = {"culprit_hit": (e.culprit.id in culprits) if culprits else None,
           "reference_culprits": list(culprits), "tolerance_mm": tolerance_mm,
           "region": region_kind, "region_radius": radius_from,
           "region_pixels": int(region.sum()),
           "pointing_hit": {}, "pointing_hit_mask": {}, "peak_error_mm": {},
           "relevance_mass": {}, "relevance_rank": {}, "reasons": {}}
    for m in e.methods:
        hit, by_mask, error = _pointing(e.culprit.locations[m], lesions, mask, tolerance_mm)
        out["pointing_hit"][m], out["pointing_hit_mask"][m] = hit, by_mask
        out["peak_error_mm"][m] = error
        a = attribution_for(e.maps[m], method_aggregate(e, m))
        mass, rank = relevance_mass_accuracy(a, region), relevance_rank_accuracy(a, region)
        out["relevance_mass"][m] = None if mass.reason else mass.value
        out["relevance_rank"][m] = None if rank.reason else rank.value
        if mass.reason or rank.reason:
            out["reasons"][m] = mass.reason or rank.reason
    return out
