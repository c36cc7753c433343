"""index.html of an audit: one self-contained page (figures inline) for the reviewer.

From top to bottom: the caution, the counts, the confusion matrix as a shaded table, the two
binary views, the distributions of the metrics, the misgraded cases worst first (largest
|grade error|, then smallest margin) with a link to each report, and the cases that could not be
explained, with their errors.
"""

from __future__ import annotations

import base64
import html
import io
import math

from .. import CAUTION

__all__ = ["audit_html", "failure_order"]

_STYLE = """
body{font-family:system-ui,sans-serif;margin:0;background:#fbfbf8;color:#1d1d1b}
main{max-width:1100px;margin:0 auto;padding:1em 1.5em 3em}
h1{font-size:1.45em}h2{font-size:1.1em;margin-top:1.8em;border-bottom:1px solid #ccc}
.caution{background:#fdf1e0;border-left:5px solid #b25d00;padding:.6em .9em}
table{border-collapse:collapse;font-size:.88em;background:#fff}
th,td{border:1px solid #d6d6d0;padding:.25em .5em;text-align:left}
td.n{text-align:right;font-variant-numeric:tabular-nums}
.matrix td{width:3em;text-align:center}
figure{display:inline-block;margin:.5em;background:#fff;border:1px solid #ddd;padding:.3em}
"""


def _e(value):
    return html.escape("" if value is None else str(value))


def _pct(p):
    if p.get("value") is None:
        return "n/a (no cases)"
    lo, hi = p["ci95"]
    return f"{100 * p['value']:.1f} % ({p['k']}/{p['n']}; 95 % CI {100 * lo:.1f}-{100 * hi:.1f} %)"


def _matrix(confusion):
    labels, matrix = confusion["labels"], confusion["matrix"]
    top = max([max(r) for r in matrix] + [1])
    head = "".join(f"<th>{_e(lab)}</th>" for lab in labels)
    body = []
    for lab, counts in zip(labels, matrix):
        cells = []
        for j, n in enumerate(counts):
            on_diag = labels[j] == lab
            alpha = 0.0 if n == 0 else 0.15 + 0.75 * n / top
            colour = "30,110,70" if on_diag else "170,60,40"
            cells.append(f'<td style="background:rgba({colour},{alpha:.2f})">{n}</td>')
        body.append(f"<tr><th>{_e(lab)}</th>{''.join(cells)}</tr>")
    return (f'<table class="matrix"><tr><th>reference \\ predicted</th>{head}</tr>'
            f"{''.join(body)}</table>")


def _binary(binary):
    rows = []
    for name, view in (("any disease (category 1 or higher)", binary["any_disease"]),
                       ("obstructive disease (category 3 or higher)", binary["obstructive"])):
        rows.append(f"<tr><td>{_e(name)}</td><td>{_e(_pct(view['sensitivity']))}</td>"
                    f"<td>{_e(_pct(view['specificity']))}</td></tr>")
    return ("<table><tr><th>view</th><th>sensitivity</th><th>specificity</th></tr>"
            + "".join(rows) + "</table>")


def _histograms(rows, methods):
    import matplotlib

    matplotlib.use("Agg")
    from matplotlib.figure import Figure

    columns = ["margin"] + [f"{m}_{w}" for m in methods for w in ("peak_error_mm",
                                                                    "relevance_mass")]
    out = []
    for column in columns:
        values = [float(r[column]) for r in rows if isinstance(r.get(column), (int, float))
                  and not isinstance(r.get(column), bool) and math.isfinite(float(r[column]))]
        if not values:
            continue
        fig = Figure(figsize=(3.4, 2.4), dpi=100)
        ax = fig.subplots()
        ax.hist(values, bins=min(20, max(5, len(values) // 2)), color="#4a6f8a")
        ax.set_title(column, fontsize=9)
        ax.set_ylabel("cases", fontsize=8)
        ax.tick_params(labelsize=7)
        fig.tight_layout()
        buffer = io.BytesIO()
        fig.savefig(buffer, format="png")
        data = base64.b64encode(buffer.getvalue()).decode("ascii")
        out.append(f'<figure><img alt="{_e(column)}" src="data:image/png;base64,{data}"></figure>')
    return "".join(out) or "<p>No metric values to plot.</p>"


def failure_order(rows):
    """Misgraded ok rows, largest |grade_error| first, then smallest margin."""
    bad = [r for r in rows if r.get("status") == "ok" and r.get("grade_error") not in (None, 0)]

    def margin(r):
        m = r.get("margin")
        return float(m) if isinstance(m, (int, float)) else math.inf

    return sorted(bad, key=lambda r: (-abs(int(r["grade_error"])), margin(r)))


def _failures(rows):
    ranked = failure_order(rows)
    if not ranked:
        return "<p>No misgraded case among the cases explained.</p>"
    out = ["<table><tr><th>case</th><th>reference</th><th>predicted</th><th>error</th>"
           "<th>culprit</th><th>reference culprit</th><th>margin</th><th>flags</th></tr>"]
    for r in ranked:
        link = f"cases/{r['_folder']}/report.html"
        margin = r.get("margin")
        out.append(
            f'<tr><td><a href="{_e(link)}">{_e(r["case_id"])}</a></td>'
            f"<td>{_e(r.get('reference_grade'))}</td><td>{_e(r.get('predicted_grade'))}</td>"
            f"<td class=n>{int(r['grade_error']):+d}</td><td>{_e(r.get('culprit'))}</td>"
            f"<td>{_e(r.get('reference_culprit'))}</td>"
            f"<td class=n>{'' if margin is None else f'{float(margin):.3g}'}</td>"
            f"<td>{_e((r.get('flags') or '').replace(';', ', '))}</td></tr>")
    out.append("</table>")
    return "".join(out)


def _unreadable(rows):
    failed = [r for r in rows if r.get("status") != "ok"]
    if not failed:
        return "<p>Every case was explained.</p>"
    items = "".join(f"<tr><td>{_e(r['case_id'])}</td><td>{_e(r['case'])}</td>"
                    f"<td>{_e(r.get('error'))}</td></tr>" for r in failed)
    return f"<table><tr><th>case</th><th>manifest</th><th>error</th></tr>{items}</table>"


def audit_html(summary, rows, *, methods):
    """The page as text; ``rows`` carry ``_folder`` (the case's folder under ``cases/``)."""
    c = summary["counts"]
    model = summary.get("model") or {}
    pointing = "".join(f"<li>{_e(m)} peak on the lesion: {_e(_pct(p))}</li>"
                       for m, p in summary["pointing_rate"].items())
    flags = "".join(f"<li>{_e(k)}: {v}</li>" for k, v in summary["flags"].items()) or "<li>none</li>"
    return f"""<!DOCTYPE html>
<html lang="en"><head><meta charset="utf-8"><title>culprit-lens audit</title>
<style>{_STYLE}</style></head><body><main>
<h1>Cohort audit</h1>
<p class="caution"><strong>Caution.</strong> {_e(CAUTION)}</p>
<p>{c['rows']} cases: {c['ok']} explained, {c['failed']} failed, {c['with_reference']} with a
reference grade. Model {_e(model.get('name'))}, weights {_e(summary.get('weights_hash'))},
culprit-lens {_e(summary.get('library_version'))}, seed {_e(summary['settings'].get('seed'))}.</p>
<h2>Grades: reference against predicted</h2>
{_matrix(summary['confusion'])}
<p>Exact: {_e(_pct(summary['accuracy']))}. Within one category: {_e(_pct(summary['within_one']))}.</p>
<h2>Binary views</h2>
{_binary(summary['binary'])}
<h2>Where the explanations point</h2>
<ul><li>culprit is the most stenosed segment: {_e(_pct(summary['culprit_hit_rate']))}</li>
{pointing}</ul>
<p>Flags raised:</p><ul>{flags}</ul>
{_histograms(rows, methods)}
<h2>Misgraded cases, worst first</h2>
{_failures(rows)}
<h2>Cases that could not be explained</h2>
{_unreadable(rows)}
</main></body></html>
"""
