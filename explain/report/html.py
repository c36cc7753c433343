"""report.html: one self-contained page built from the report dict.

Images are embedded as base64 ``data:`` URIs; there are no scripts, external fonts, style
sheets or links, so the page works offline. Every string that came from the inputs (case id,
paths, model name, settings) is escaped with :func:`html.escape`.
"""

from __future__ import annotations

import base64
import json

from ..errors import InputError
from .html_parts import e as _e, num as _num, table as _table, td as _td, vec as _vec
from .quality_html import quality_section
from .quality_figures import FAITHFULNESS_FIGURE
from .wording import target_phrase, verdict

__all__ = ["report_html"]

_STYLE = """
body{font-family:system-ui,-apple-system,"Segoe UI",Helvetica,Arial,sans-serif;margin:0;
background:#f7f7f5;color:#1d1d1d;line-height:1.45}
main{max-width:1100px;margin:0 auto;padding:1.2em 1.6em 3em}
h1{font-size:1.5em;margin:.4em 0 .2em}h3{font-size:1em;margin:1.1em 0 .3em}h2{font-size:1.15em;margin:1.6em 0 .5em;
border-bottom:1px solid #cfcfcf;padding-bottom:.2em}
.caution{background:#fff4d6;border-left:5px solid #d89a00;padding:.6em .9em;margin:.8em 0}
.answer{background:#fff;border:1px solid #d9d9d9;padding:.8em 1em;font-size:1.05em}
.answer b{color:#8b1e1e}
table{border-collapse:collapse;background:#fff;font-size:.88em;margin:.3em 0}
th,td{border:1px solid #d9d9d9;padding:.25em .55em;text-align:left;vertical-align:top}
th{background:#eceae4}td.n{text-align:right;font-variant-numeric:tabular-nums}
tr.culprit td{background:#fde9e4;font-weight:600}
figure{margin:1em 0;background:#fff;border:1px solid #d9d9d9;padding:.5em}
figure img{max-width:100%;height:auto;display:block}
figcaption{font-size:.88em;color:#444;margin-top:.3em}
code{font-size:.92em}
.wide{overflow-x:auto}
"""

_CAPTIONS = {
    "contributions": "Contribution of each segment to the target: Shapley value over segments "
                     "({shapley}) and leave-one-out, in the target's units (named on the axis).",
    "tree": "Schematic coronary tree (our own drawing, not to scale) coloured by Shapley value; "
            "the culprit is cased in dark, the diamond marks the peak of the first method along "
            "it.",
    "culprit": "The culprit along its arc: on top the map's profile per mm of arc, under it one "
               "straightened cut through the peak pixel on the same arc axis (CT in grey, the "
               "map over it), and the cross-section at the peak as an inset tied to its place "
               "on that axis; the grey window comes from the lumen's HU in this case.",
    "profiles": "Positive attribution (absolute values for gradient and smoothgrad) per mm of "
                "arc along every vessel, one scale for all segments (segments differ in length "
                "but not in cross-sections, so per-section sums would not compare); reference "
                "lesions shaded when the case has them.",
}


def _where_rows(report):
    rows = []
    for method, w in report["culprit"]["where"].items():
        ext = w.get("extent_mm")
        rows.append([_td(_e(method)), _td(_num(w.get("arc_mm"), ".1f"), True),
                     _td("&ndash;" if ext is None else f"{_num(ext[0], '.1f')} &ndash; "
                         f"{_num(ext[1], '.1f')}", True),
                     _td(_vec(w.get("xyz_mm"))), _td(_vec(w.get("voxel"), "d"))])
    return rows


def _shapley_cell(segment):
    """The Shapley value; "value &plusmn; standard error" when it was sampled."""
    stderr = segment.get("shapley_stderr")
    value = _num(segment["shapley"], ".3f")
    return value if stderr is None else f"{value} &plusmn; {_num(stderr, '.3f')}"


def _segment_table(report):
    methods = report["settings"]["methods"]
    header = ["segment", "name", "territory", "Shapley", "leave-one-out", "gradient x feature",
              "channels won", "ref. stenosis %"] + [f"{m} peak mm" for m in methods]
    rows, classes = [], []
    culprit = report["culprit"]["segment_id"]
    for s in report["segments"]:
        row = [_td(f"{_e(s['id'])} ({_e(s['abbr'])})"), _td(_e(s["name"])), _td(_e(s["territory"])),
               # fixed decimals in target units: float noise (~1e-7) of an exact
               # difference reads as 0.000, not as 4.768e-07
               _td(_shapley_cell(s), True), _td(_num(s["leave_one_out"], ".3f"), True),
               _td(_num(s["gradient_x_feature"], ".3f"), True),
               _td(_e(len(s["winning_channels"])), True),
               _td(_num(s["reference_stenosis_percent"], "g"), True)]
        for m in methods:
            peak = s["peaks"].get(m)
            row.append(_td(_num(None if peak is None else peak["arc_mm"], ".1f"), True))
        rows.append(row)
        classes.append("culprit" if s["id"] == culprit else "")
    return _table(header, rows, classes=classes)


def _figures(report, images):
    parts = []
    for name in report["files"]["figures"]:
        data = images.get(name)
        if name.endswith(FAITHFULNESS_FIGURE):  # shown in its own section
            continue
        if not data:
            raise InputError(
                f"report_html: figure {name!r} is listed in report['files']['figures'] but "
                f"{'no' if data is None else 'empty'} PNG bytes were given for it; pass the bytes "
                "of every listed figure (explain.report.figures.write_figures writes them), or "
                "leave it out of the list")
        stem = name.rsplit("/", 1)[-1].rsplit(".", 1)[0]
        kind, _, method = stem.partition("_")
        caption = _CAPTIONS.get(kind, "").replace("{shapley}", _shapley_kind(report))
        title = f"{method}: " if method else ""
        uri = "data:image/png;base64," + base64.b64encode(data).decode("ascii")
        parts.append(f'<figure><img src="{uri}" alt="{_e(stem)}">'
                     f"<figcaption><b>{_e(title)}</b>{_e(caption)} "
                     f"(<code>{_e(name)}</code>)</figcaption></figure>")
    return "\n".join(parts)


def _shapley_kind(report):
    """"exact over all coalitions", or "sampled ..." with the standard error's whereabouts."""
    kind = report.get("settings", {}).get("shapley")
    if kind:
        return kind
    sampled = any(s.get("shapley_stderr") is not None for s in report.get("segments", []))
    return "sampled by permutations; standard error per segment" if sampled else "exact"


def _tie_sentence(culprit):
    tied = culprit.get("tied_with") or []
    if not tied:
        return ""
    return (f" <b>It is level with segment(s) {_e(', '.join(str(t) for t in tied))}</b> (a tie "
            "within rounding): the lowest SCCT number is named, the model does not single it out.")


def _key_values(mapping):
    rows = []
    for key, value in mapping.items():
        if isinstance(value, dict):
            value = json.dumps(value)
        elif isinstance(value, (list, tuple)):
            value = ", ".join(str(v) for v in value)
        rows.append([_td(_e(key)), _td(_e("null" if value is None else value))])
    return _table(["setting", "value"], rows)


def _answer(culprit, target):
    """The culprit sentence; an inconclusive one names no segment as the cause."""
    what = f"{_e(target_phrase(target['label']))}, value {_num(target['value'])}"
    if culprit.get("doubts"):
        return (f"<b>{_e(culprit['statement'])}</b> (Target: {what}; Shapley value "
                f"{_num(culprit['shapley'])}, margin {_num(culprit['margin'])} over the next "
                "segment.)")
    return (f"The segment that drove the target ({what}) is\n<b>{_e(culprit['segment_id'])} "
            f"({_e(culprit['segment_abbr'])}, {_e(culprit['segment_name'])})</b>,\nwith a "
            f"Shapley value of {_num(culprit['shapley'])} and a margin of "
            f"{_num(culprit['margin'])}\nover the next segment.")


def report_html(report, images):
    """The page as text.

    Parameters
    ----------
    report : dict
        The content of report.json (:func:`explain.report.jsonout.explanation_dict`).
    images : dict of str to bytes
        PNG bytes of each figure, keyed by its relative path in ``report["files"]["figures"]``.
    """
    pred, target, culprit = report["prediction"], report["target"], report["culprit"]
    ref = report.get("reference")
    scores = [[_td(_e(label)), _td(_num(value), True),
               _td(_num(pred["probabilities"].get(label), ".3f"), True)]
              for label, value in pred["scores"].items()]
    reference = ""
    if ref is not None:
        lesions = ", ".join(f"segment {_e(les['segment'])} {_num(les['start_mm'], '.1f')}&ndash;"
                            f"{_num(les['end_mm'], '.1f')} mm" for les in ref["lesions"]) or "none"
        reference = (f"<p>Reference given with the case: grade {_e(ref['grade'])}; "
                     f"lesions: {lesions}.</p>")
    first = next(iter(culprit["where"].values()), {})
    where = "" if first.get("arc_mm") is None else (
        f" Its map peaks at <b>{_num(first['arc_mm'], '.1f')} mm</b> from the segment's start "
        f"({_e(next(iter(culprit['where'])))}).")
    cautions = "".join(f"<li>{_e(c)}</li>" for c in report["cautions"])
    notes = "".join(f"<li>{_e(n)}</li>" for n in report.get("notes", []))
    warnings = "".join(f"<li>{_e(n)}</li>" for n in report.get("warnings", []))
    files = report["files"]
    file_list = [files["report"], files["table"], files["attributions"],
                 *files["overlays"].values(), *files.get("dicom", []), *files["figures"]]
    model = report["model"]
    return f"""<!DOCTYPE html>
<html lang="en"><head><meta charset="utf-8">
<meta name="viewport" content="width=device-width, initial-scale=1">
<title>culprit-lens report: {_e(report['case_id'])}</title>
<style>{_STYLE}</style></head>
<body><main>
<h1>Case {_e(report['case_id'])}</h1>
<div class="caution"><b>Caution.</b> {_e(report['cautions'][0])}</div>
<div class="answer"><b>{_e(verdict(pred))}</b>
{_answer(culprit, target)}{_tie_sentence(culprit)}{where}</div>
{f'<div class="caution"><b>Warnings.</b><ul>{warnings}</ul></div>' if warnings else ''}
{reference}
<h2>Where along the culprit</h2>
{_table(["method", "peak (mm of arc)", "half-peak extent (mm)", "peak x, y, z (mm)",
         "peak voxel i, j, k"], _where_rows(report))}
{quality_section(report, images)}
<h2>Prediction</h2>
<p>Model <code>{_e(model.get('name'))}</code>, weights hash <code>{_e(model.get('weights_hash'))}</code>.</p>
{_table(["output column", "score", "softmax probability"], scores)}
<h2>Segments</h2>
{_segment_table(report)}
<h2>Figures</h2>
{_figures(report, images)}
<h2>Settings</h2>
{_key_values(report['settings'])}
<h2>Files</h2>
<ul>{''.join(f'<li><code>{_e(f)}</code></li>' for f in file_list)}</ul>
<h2>Cautions</h2>
<ul>{cautions}</ul>
{f'<h2>Notes</h2><ul>{notes}</ul>' if notes else ''}
<p><small>Report format {_e(report['format'])}; case file <code>{_e(report['case']['path'])}</code>.</small></p>
</main></body></html>
"""
