"""The "How far to trust this" section of report.html, built from report.json's ``quality``."""

from __future__ import annotations

import base64

from .html_parts import e as _e, num as _num, table as _table, td as _td
from .quality_figures import FAITHFULNESS_FIGURE
from .wording import flag_sentence

__all__ = ["quality_section"]

_REGION_WORDS = {"inside_vessel": "inside the vessel", "border": "on the patch border",
                 "calcium": "on bright calcium", "segment_end": "near a segment end"}


def _yes_no(value):
    return "&ndash;" if value is None else ("yes" if value else "no")


def _flags(quality):
    settings = quality["settings"]
    if not quality["flags"]:
        return "<p>No flag raised: none of the checks below passed its threshold.</p>"
    items = "".join(
        f"<li><b>{_e(flag)}</b>: "
        f"{_e(flag_sentence(flag, settings, quality['flag_methods'].get(flag, ())))}</li>"
        for flag in quality["flags"])
    return f"<ul>{items}</ul>"


def _localisation(local):
    if local is None:
        return "<p>The case has no reference, so nothing is compared with a known lesion.</p>"
    region = ("the lesion mask sampled onto the cross-sections" if local["region"] == "lesion_mask"
              else "the lesions' arc extents crossed with a disc of the lumen radius "
              f"({local.get('region_radius') or 'no lesion on the segments'})")
    hit = {True: "is", False: "is not", None: "cannot be compared with"}[local["culprit_hit"]]
    rows = [[_td(_e(m)), _td(_yes_no(local["pointing_hit"][m])),
             _td(_yes_no(local["pointing_hit_mask"][m])),
             _td(_num(local["peak_error_mm"][m], ".1f"), True),
             _td(_num(local["relevance_mass"][m], ".2f"), True),
             _td(_num(local["relevance_rank"][m], ".2f"), True)]
            for m in local["pointing_hit"]]
    tol = _num(local["tolerance_mm"], "g")
    return (f"<p>The culprit {hit} the segment of highest reference stenosis. Lesion region: "
            f"{_e(region)}; pointing tolerance {tol} mm.</p>"
            + _table(["method", f"peak within {tol} mm of a lesion (arc)",
                      f"peak within {tol} mm of the mask", "peak to lesion centre (mm)",
                      "relevance mass", "relevance rank"], rows))


def _mass(mass):
    rows = []
    for where, shares in (("culprit", mass["culprit"]), ("all segments", mass["all_segments"])):
        for m, by_region in shares.items():
            rows.append([_td(_e(m)), _td(_e(where))]
                        + [_td(_num(by_region[r], ".0%"), True) for r in mass["regions"]])
    return _table(["method", "over"] + [_REGION_WORDS.get(r, r) for r in mass["regions"]], rows)


def _faithfulness(faith, images):
    if faith is None:
        return "<p>No faithfulness curves (the assessment was made without the model).</p>"
    seg, sec = faith["segments"], faith["culprit_cross_sections"]
    rows = [[_td("segments, Shapley order")] + [
        _td(_num(seg[k], ".2f"), True) for k in
        ("deletion_auc", "random_deletion_auc", "deletion_minus_random", "insertion_auc",
         "random_insertion_auc", "insertion_minus_random")]]
    for m, c in sec["methods"].items():
        rows.append([_td(f"culprit pixels, {_e(m)} order")] + [
            _td(_num(c[k], ".2f"), True) for k in
            ("deletion_auc", "random_deletion_auc", "deletion_minus_random", "insertion_auc",
             "random_insertion_auc", "insertion_minus_random")])
    figure = ""
    data = images.get(f"figures/{FAITHFULNESS_FIGURE}")
    if data is not None:
        uri = "data:image/png;base64," + base64.b64encode(data).decode("ascii")
        figure = (f'<figure><img src="{uri}" alt="faithfulness"><figcaption>Deletion and '
                  "insertion: the target as segments (left) or culprit pixels (right) are "
                  "removed in the explanation's order and in random order "
                  f"(<code>figures/{FAITHFULNESS_FIGURE}</code>).</figcaption></figure>")
    return ("<p>Areas under the curves, scaled so that the whole patient is 1 and no segment "
            "is 0. A faithful explanation loses the target faster than random when what it "
            "ranks first is removed (deletion area below random, a negative difference) and "
            "regains it faster when that is inserted first (a positive difference).</p>"
            + _table(["curve", "deletion", "random", "difference", "insertion", "random",
                      "difference"], rows) + figure)


def quality_section(report, images):
    """The section's HTML, or an empty string when the report has no ``quality``."""
    quality = report.get("quality")
    if quality is None:
        return ""
    return ("<h2>How far to trust this</h2>\n<h3>Flags</h3>\n" + _flags(quality)
            + "\n<h3>Against the reference</h3>\n" + _localisation(quality["localisation"])
            + "\n<h3>Where the map's mass lies</h3>\n" + _mass(quality["mass"])
            + "\n<h3>Faithfulness</h3>\n" + _faithfulness(quality["faithfulness"], images))
