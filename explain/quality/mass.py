"""Where the attribution mass goes: shares inside the vessel, on the patch rim, on bright
calcium and near a segment's ends (no reference needed).

Each share is the method's non-negative attribution (:func:`~explain.quality.regions.attribution_for`:
the positive part, or the magnitude for gradient and smoothgrad) inside a region over all of it,
on one segment's stack, on the culprit, or summed over every segment. A map with no such
attribution has no share (None).
"""

from __future__ import annotations

from .regions import (attribution_for, calcium_region, end_region, method_aggregate,
                      radius_per_section, rim_region, vessel_region)

__all__ = ["REGION_NAMES", "segment_regions", "mass_fractions"]

#: The regions whose share of the mass is reported, in order.
REGION_NAMES = ("inside_vessel", "border", "calcium", "segment_end")


def segment_regions(section, segment, *, settings):
    """The four regions of :data:`REGION_NAMES` on one segment's stack, each ``(N, H, W)`` bool.

    Parameters
    ----------
    section : explain.geometry.CrossSections
    segment : explain.case.Segment
    settings : explain.quality.settings.QualitySettings
    """
    shape = section.shape
    radius, _ = radius_per_section(segment, section.arc_mm)
    return {
        "inside_vessel": vessel_region(shape, section.pixel_mm, radius,
                                       wall_margin_mm=settings.wall_margin_mm),
        "border": rim_region(shape, width_px=settings.rim_px),
        "calcium": calcium_region(section.values, calcium_hu=settings.calcium_hu),
        "segment_end": end_region(shape, section.arc_mm, segment.centerline.length_mm,
                                  end_mm=settings.end_mm),
    }


def _share(inside, total):
    return float(inside / total) if total > 0 else None


def mass_fractions(explanation, case, *, settings):
    """Shares of each method's attribution in each region.

    Returns
    -------
    dict
        ``per_segment``: {segment id: {method: {region: share or None}}};
        ``culprit``: {method: {region: share}} (the culprit's entry of ``per_segment``);
        ``all_segments``: {method: {region: share}} over every segment's stack together.
    """
    e = explanation
    by_id = {s.id: s for s in case.segments}
    aggregates = {m: method_aggregate(e, m) for m in e.methods}
    per_segment = {}
    sums = {m: {r: 0.0 for r in REGION_NAMES + ("total",)} for m in e.methods}
    for s, (segment_id, section) in enumerate(zip(e.sections.segment_ids, e.sections.sections)):
        regions = segment_regions(section, by_id[segment_id], settings=settings)
        per_segment[int(segment_id)] = {}
        for m in e.methods:
            a = attribution_for(e.maps[m][s], aggregates[m])
            total = float(a.sum())
            sums[m]["total"] += total
            shares = {}
            for name, region in regions.items():
                inside = float(a[region].sum())
                sums[m][name] += inside
                shares[name] = _share(inside, total)
            per_segment[int(segment_id)][m] = shares
    all_segments = {m: {r: _share(sums[m][r], sums[m]["total"]) for r in REGION_NAMES}
                    for m in e.methods}
    return {"per_segment": per_segment, "culprit": per_segment[int(e.culprit.id)],
            "all_segments": all_segments}
