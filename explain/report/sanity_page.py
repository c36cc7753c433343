"""sanity.json, sanity.png and sanity.html: the files of ``culprit-lens sanity``.

The page is self-contained (the figure embedded as a base64 ``data:`` URI, no scripts, no
links); every string from the inputs is escaped. The figure shows, per method, the similarity of
the map with the trained model's against the number of layers randomised.
"""

from __future__ import annotations

import base64
import html
import io
import math

import numpy as np
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure

from .figures import FIGURE_DPI
from .html import _STYLE

__all__ = ["similarity_figure", "sanity_html", "write_sanity_into"]

# Our own line colours, one per method, in the order methods are listed.
_COLOURS = ("#1f4e79", "#b5562a", "#4b7f3a", "#7a4b8f", "#8c7a1e", "#3c7d8c")


def _e(value):
    return html.escape(str(value), quote=True)


def _num(value, fmt=".3f"):
    if value is None or (isinstance(value, float) and not math.isfinite(value)):
        return "&ndash;"
    return format(value, fmt)


def similarity_figure(report):
    """Spearman and mean SSIM against randomisation depth, one line per method."""
    rnd = report["randomisation"]
    labels = ["trained"] + [layer["name"] for layer in rnd["layers"]]
    depth = np.arange(len(labels))
    fig = Figure(figsize=(9.0, 3.8), dpi=FIGURE_DPI)
    FigureCanvasAgg(fig)
    axes = fig.subplots(1, 2, sharex=True)
    panels = (("spearman", "Spearman of |map| with the trained map"),
              ("ssim_mean", "SSIM of |map| (mean over segments)"))
    for ax, (key, title) in zip(axes, panels):
        for n, (method, values) in enumerate(rnd["methods"].items()):
            y = [np.nan if v is None else v for v in values[key]]
            ax.plot(depth, y, marker="o", ms=4, lw=1.6, color=_COLOURS[n % len(_COLOURS)],
                    label=method)
        ax.set_title(title, fontsize=9.5)
        ax.set_xticks(depth, labels, rotation=40, ha="right", fontsize=8)
        ax.set_ylim(-1.05, 1.05)
        ax.axhline(0.0, color="#bbbbbb", lw=0.8)
        ax.grid(axis="y", color="#e6e6e6", lw=0.6)
        ax.set_xlabel("layers randomised, output end first", fontsize=8.5)
    axes[0].axhline(rnd["pass_below"], color="#8b1e1e", lw=1.0, ls="--")
    axes[0].text(depth[-1], rnd["pass_below"] + 0.03, f"pass below {rnd['pass_below']:g}",
                 ha="right", va="bottom", fontsize=8, color="#8b1e1e")
    axes[0].legend(fontsize=8, frameon=False, loc="lower left")
    fig.tight_layout()
    return fig


def _png(fig):
    buffer = io.BytesIO()
    fig.savefig(buffer, format="png", dpi=FIGURE_DPI)
    return buffer.getvalue()


def _table(header, rows):
    head = "".join(f"<th>{h}</th>" for h in header)
    body = "".join("<tr>" + "".join(f"<td>{c}</td>" for c in row) + "</tr>" for row in rows)
    return f'<div class="wide"><table><tr>{head}</tr>{body}</table></div>'


def _verdict(passed):
    return "no verdict (undefined)" if passed is None else ("passes" if passed else "fails")


def _randomisation_html(rnd):
    verdicts = [[_e(m), _num(v["final_spearman"]), _num(v["ssim_mean"][-1]),
                 f"<b>{_verdict(v['passed'])}</b>"] for m, v in rnd["methods"].items()]
    steps = [["0", "(trained model)", ""] + ["1.000"] * len(rnd["methods"])]
    for layer in rnd["layers"]:
        d = layer["depth"]
        steps.append([str(d), _e(layer["name"]), _e(layer["kind"])]
                     + [_num(v["spearman"][d]) for v in rnd["methods"].values()])
    return (f"<p>Pass rule: {_e(rnd['pass_rule'])}.</p>"
            + _table(["method", "Spearman after full randomisation", "mean SSIM", "verdict"],
                     verdicts)
            + "<h2>Step by step (Spearman of |map|)</h2>"
            + _table(["depth", "layer randomised", "type", *map(_e, rnd["methods"])], steps))


def _stability_html(stab):
    if stab is None:
        return "<p>Not run.</p>"
    methods = list(stab["mean_spearman"])
    rows = []
    for run in [stab["unaugmented"], *stab["augmented"]]:
        what = {"none": "unaugmented", "rotation": f"rotation {run['setting']:g}&deg;",
                "jitter": f"jitter draw {run['setting']:g}"}[run["kind"]]
        rows.append([what, _e(run["grade"] if run["grade"] is not None else run["column"]),
                     _e(run["culprit"]), _num(run["target"], ".4g")]
                    + [_num(run["spearman"].get(m)) if run["kind"] != "none" else "1"
                       for m in methods])
    s = stab["settings"]
    return (f"<p>Rotations about the tangent {_e(s['rotations_deg'])} degrees; "
            f"{s['jitter_draws']} centerline jitter draws of {s['jitter_rms_mm']:g} mm RMS. "
            f"Grade agrees with the unaugmented run in {_num(stab['grade_agreement'], '.0%')} "
            f"of augmentations, the culprit in {_num(stab['culprit_agreement'], '.0%')}; "
            f"mean target over all runs {_num(stab['mean_target'], '.4g')} "
            f"(sd {_num(stab['target_sd'], '.3g')}).</p>"
            + _table(["run", "grade (top column)", "culprit segment", "target",
                      *(f"Spearman {_e(m)}" for m in methods)], rows))


def sanity_html(report, png):
    """The page as text, from the sanity.json dict and the figure's PNG bytes."""
    uri = "data:image/png;base64," + base64.b64encode(png).decode("ascii")
    settings = "".join(f"<tr><th>{_e(k)}</th><td><code>{_e(v)}</code></td></tr>"
                       for k, v in report["settings"].items())
    model = report["model"]
    return f"""<!DOCTYPE html>
<html lang="en"><head><meta charset="utf-8">
<meta name="viewport" content="width=device-width, initial-scale=1">
<title>culprit-lens sanity checks: {_e(report['case_id'])}</title>
<style>{_STYLE}</style></head>
<body><main>
<h1>Sanity checks: case {_e(report['case_id'])}</h1>
<div class="caution"><b>Caution.</b> {_e(report['caution'])}</div>
<p>Model <code>{_e(model['name'])}</code>, weights hash <code>{_e(model['weights_hash'])}</code>.
Does each map depend on what the model learned? Its layers are reinitialised one by one from the
output end (cascading randomisation, Adebayo et al. 2018) and the map recomputed each time.</p>
<h2>Randomisation</h2>
{_randomisation_html(report['randomisation'])}
<figure><img src="{uri}" alt="similarity of each map with the trained model's against layers randomised">
<figcaption>Similarity with the trained model's map after each layer is randomised
(seed {_e(report['randomisation']['seed'])}).</figcaption></figure>
<h2>Stability and grades under augmentation</h2>
{_stability_html(report['stability'])}
<h2>Settings</h2>
<table>{settings}</table>
<p><small>Format {_e(report['format'])}; case file <code>{_e(report['case']['path'])}</code>.</small></p>
</main></body></html>
"""


def write_sanity_into(check, folder):
    """Write sanity.json, sanity.png and sanity.html of ``check`` into ``folder``."""
    from pathlib import Path

    from ..io import write_text
    from .jsonout import dumps

    folder = Path(folder)
    report = check.to_dict()
    png = _png(similarity_figure(report))
    (folder / "sanity.png").write_bytes(png)
    write_text(dumps(report), folder / "sanity.json")
    write_text(sanity_html(report, png), folder / "sanity.html")
