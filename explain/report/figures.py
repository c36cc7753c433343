"""The report's figures (matplotlib, Agg backend, no pyplot state).

- ``profiles_<method>.png``: the map's profile along every vessel as attribution per mm of arc
  (segments have the same number of cross-sections whatever their length, so per-section sums
  would not compare), one row per territory with its segments laid end to end, boundaries
  marked, reference lesions shaded; one y scale.
- ``culprit_<method>.png``: the culprit along its arc: the profile per mm of arc on top, one
  straightened cut under it on the same arc axis, the cross-section at the peak as an inset
  tied to its arc position; grey window from the case's lumen (:mod:`.straightened`).
- ``contributions.png``: Shapley and leave-one-out contribution of every segment.
- ``tree.png``: a schematic coronary tree of our own drawing coloured by Shapley value.
"""

from __future__ import annotations

import numpy as np
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.cm import ScalarMappable
from matplotlib.colors import LinearSegmentedColormap, TwoSlopeNorm
from matplotlib.figure import Figure

from ..anatomy import SEGMENT_TABLE
from .wording import target_phrase, target_unit

__all__ = ["METHOD_UNITS", "FIGURE_DPI", "TREE_COLOURS", "new_figure", "profile_figure", "culprit_figure",
           "contribution_figure", "tree_figure", "write_figures"]

FIGURE_DPI = 110

#: What one pixel of each method's map measures (captum's conventions).
METHOD_UNITS = {
    "gradient": "target per HU",
    "gradient_x_input": "target units",
    "smoothgrad": "target per HU",
    "integrated_gradients": "target units",
    "gradcam": "target units",  # the channel weight d target / d activation carries the units
    "occlusion": "drop in target units",
}

# Rows of the profile figure: main vessel first, then its branches (proximal to distal order).
_ROWS = (("RCA", (1, 2, 3, 4, 16)), ("LM and LAD", (5, 6, 7, 8, 9, 10)),
         ("LCx", (11, 13, 12, 14, 15, 18)))
_GAP_MM = 4.0
_LESION = "#f2b880"
_LINE = "#1f4e79"


def new_figure(width, height):
    """A matplotlib Figure on an Agg canvas (no pyplot state)."""
    fig = Figure(figsize=(width, height), dpi=FIGURE_DPI)
    FigureCanvasAgg(fig)
    return fig


def _target_unit(explanation):
    """What one unit of the target is (see :func:`explain.report.wording.target_unit`)."""
    return target_unit(explanation.target["label"])


def _units(method, explanation):
    """METHOD_UNITS of ``method``, in CAD-RADS categories where the target is the expected one."""
    units, unit = METHOD_UNITS.get(method, "attribution"), _target_unit(explanation)
    if unit == "target units":
        return units
    return units.replace("target units", unit).replace("target", unit)


def _aggregate(explanation, method):
    return explanation.segments[0].locations[method].aggregate


def _lesions_by_segment(explanation):
    ref = getattr(explanation.case, "reference", None)
    out = {}
    for les in () if ref is None else ref.lesions:
        out.setdefault(int(les.segment), []).append((les.start_mm, les.end_mm))
    return out


def _rows(explanation):
    present = {s.id: s for s in explanation.segments}
    rows = []
    for name, ids in _ROWS:
        ids = list(ids)
        territory = name.split()[-1]
        if 17 in present and present[17].territory == territory:
            ids.append(17)
        segs = [present[i] for i in ids if i in present]
        if segs:
            rows.append((name, segs))
    return rows


def profile_figure(explanation, method):
    """Profiles of one method along every vessel (shared y axis: raw values)."""
    e = explanation
    rows = _rows(e)
    lesions = _lesions_by_segment(e)
    culprit_id = e.culprit.id
    fig = new_figure(10.0, 1.2 + 1.9 * len(rows))
    axes = fig.subplots(len(rows), 1, sharey=True, squeeze=False)[:, 0]
    top = max((s.locations[method].per_mm.max() for s in e.segments), default=0.0)
    top = top if top > 0 else 1.0
    for ax, (name, segs) in zip(axes, rows):
        offset = 0.0
        for s in segs:
            loc = s.locations[method]
            x = offset + loc.arc_mm
            for start, end in lesions.get(s.id, ()):
                ax.axvspan(offset + start, offset + end, color=_LESION, alpha=0.6, lw=0)
            per_mm = loc.per_mm
            ax.plot(x, per_mm, color=_LINE, lw=1.6)
            if loc.peak is not None:
                ax.plot(offset + loc.peak.arc_mm, per_mm[loc.peak.index], "v", ms=6,
                        color="#c0392b" if s.id == culprit_id else "#555555")
            ax.axvline(offset, color="#888888", lw=0.8, ls="--")
            ax.axvline(offset + s.length_mm, color="#888888", lw=0.8, ls="--")
            weight = "bold" if s.id == culprit_id else "normal"
            ax.text(offset + s.length_mm / 2, 1.02, s.abbr, transform=ax.get_xaxis_transform(),
                    ha="center", va="bottom", fontsize=8, fontweight=weight)
            offset += s.length_mm + _GAP_MM
        ax.set_xlim(-1.0, offset - _GAP_MM + 1.0)
        ax.set_ylim(0, 1.12 * top)
        ax.set_ylabel(name, fontsize=9)
        ax.grid(axis="y", color="#e5e5e5", lw=0.6)
        ax.spines[["top", "right"]].set_visible(False)
    axes[-1].set_xlabel("arc length, segments laid end to end (mm); dashed lines: segment ends")
    what = "absolute" if _aggregate(e, method) == "absolute" else "positive"
    fig.supylabel(f"{what} attribution per mm of arc ({_units(method, e)} / mm)", fontsize=9)
    fig.suptitle(f"{method}: {what} attribution per mm of arc along each vessel "
                 f"({_units(method, e)} / mm)"
                 + ("; shaded: reference lesions" if lesions else ""), fontsize=10)
    fig.tight_layout(rect=(0, 0, 1, 0.97))
    return fig


def culprit_figure(explanation, method):
    """The culprit along its arc (see :mod:`explain.report.straightened`)."""
    from .straightened import culprit_figure as draw

    return draw(explanation, method, units=_units(method, explanation))


def contribution_figure(explanation):
    """Shapley and leave-one-out contribution per segment (target units)."""
    e = explanation
    segs = e.segments
    fig = new_figure(7.5, 1.4 + 0.32 * len(segs))
    ax = fig.add_subplot(1, 1, 1)
    y = np.arange(len(segs))[::-1]
    shap = [s.shapley for s in segs]
    loo = [s.leave_one_out for s in segs]
    stderr = [s.shapley_stderr for s in segs]
    sampled = all(v is not None for v in stderr)
    how = "Shapley value, sampled (bars: 1 standard error)" if sampled else "Shapley value, exact"
    ax.barh(y + 0.2, shap, height=0.38, color="#2c7fb8", label=how)
    ax.barh(y - 0.2, loo, height=0.38, color="#bdbdbd", label="leave-one-out")
    if sampled:
        ax.errorbar(shap, y + 0.2, xerr=stderr, fmt="none", ecolor="black", lw=0.8)
    ax.set_yticks(y, [s.label for s in segs], fontsize=8)
    for tick, index in zip(ax.get_yticklabels(), range(len(segs))):
        if index == e.culprit_index:
            tick.set_fontweight("bold")
    ax.axvline(0, color="black", lw=0.8)
    ax.set_xlabel(f"contribution to {target_phrase(e.target['label'])} ({_target_unit(e)})")
    ax.set_title(f"Segment contributions; culprit {e.culprit.label} (margin {e.margin:.3g})",
                 fontsize=10)
    ax.legend(fontsize=8, loc="upper left", bbox_to_anchor=(1.01, 1.0), frameon=False)
    ax.grid(axis="x", color="#e5e5e5", lw=0.6)
    ax.spines[["top", "right"]].set_visible(False)
    fig.tight_layout()
    return fig


#: The tree's diverging colours, of our own: teal (lowered the target), sand (none), plum (raised).
TREE_COLOURS = LinearSegmentedColormap.from_list(
    "culprit_lens_tree", ["#1b7f79", "#f2eee3", "#7a2e6b"])
_CULPRIT_CASING = "#2b1d3a"

# Our own schematic: anterior view, patient's right on the left; points on a 0-10.5 canvas.
TREE_LAYOUT = {
    1: ((4.55, 8.9), (3.6, 8.5), (2.7, 7.6)),
    2: ((2.7, 7.6), (2.0, 6.4), (1.7, 5.0)),
    3: ((1.7, 5.0), (1.9, 3.7), (2.6, 2.8)),
    4: ((2.6, 2.8), (3.6, 2.1), (4.4, 1.0)),
    16: ((2.6, 2.8), (3.3, 3.0), (3.9, 3.6)),
    5: ((5.45, 8.9), (6.0, 8.7), (6.5, 8.2)),
    6: ((6.5, 8.2), (6.6, 7.4), (6.5, 6.5)),
    7: ((6.5, 6.5), (6.3, 5.2), (6.0, 4.0)),
    8: ((6.0, 4.0), (5.6, 2.7), (5.1, 1.5)),
    9: ((6.5, 6.5), (7.0, 5.8), (7.2, 4.9)),
    10: ((6.0, 4.0), (6.6, 3.4), (6.9, 2.5)),
    17: ((6.5, 8.2), (7.3, 7.3), (7.6, 6.3)),
    11: ((6.5, 8.2), (7.4, 8.0), (8.1, 7.5)),
    12: ((8.1, 7.5), (8.3, 6.6), (8.3, 5.6)),
    13: ((8.1, 7.5), (8.8, 6.8), (9.2, 5.6), (9.2, 4.6)),
    14: ((9.2, 5.6), (8.9, 4.6), (8.5, 3.8)),
    15: ((9.2, 4.6), (8.6, 3.4), (7.8, 2.4)),
    18: ((9.2, 4.6), (9.6, 3.8), (9.7, 3.0)),
}


def _smooth(points, n=40):
    """A smooth curve through the control points (cubic spline on chord length)."""
    from scipy.interpolate import CubicSpline

    p = np.asarray(points, dtype=float)
    chord = np.concatenate([[0], np.cumsum(np.linalg.norm(np.diff(p, axis=0), axis=1))])
    bc = "natural" if len(p) > 2 else "not-a-knot"
    return CubicSpline(chord, p, axis=0, bc_type=bc)(np.linspace(0, chord[-1], n))


def _point_at(curve, fraction):
    d = np.concatenate([[0], np.cumsum(np.linalg.norm(np.diff(curve, axis=0), axis=1))])
    f = np.clip(fraction, 0, 1) * d[-1]
    return np.interp(f, d, curve[:, 0]), np.interp(f, d, curve[:, 1])


def tree_figure(explanation):
    """Schematic coronary tree coloured by each segment's Shapley value."""
    e = explanation
    by_id = {s.id: s for s in e.segments}
    vmax = max((abs(s.shapley) for s in e.segments), default=0.0) or 1.0
    norm = TwoSlopeNorm(vcenter=0.0, vmin=-vmax, vmax=vmax)
    cmap = TREE_COLOURS
    fig = new_figure(7.0, 6.4)
    ax = fig.add_axes((0.03, 0.06, 0.8, 0.86))
    cax = fig.add_axes((0.86, 0.15, 0.03, 0.65))
    ax.add_patch(_aorta())
    ax.text(5.0, 9.25, "aorta", ha="center", va="center", fontsize=7.5, color="#666666")
    culprit = e.culprit
    for segment_id, points in TREE_LAYOUT.items():
        curve = _smooth(points)
        s = by_id.get(segment_id)
        if s is None:
            ax.plot(curve[:, 0], curve[:, 1], color="#c8c8c8", lw=1.5, ls=(0, (3, 2)))
            label_colour = "#a0a0a0"
        else:
            if s is culprit:  # our mark: a dark casing with a pale gap around the culprit
                ax.plot(curve[:, 0], curve[:, 1], color=_CULPRIT_CASING, lw=14,
                        solid_capstyle="round")
                ax.plot(curve[:, 0], curve[:, 1], color="white", lw=10, solid_capstyle="round")
            else:  # a thin rim keeps near-zero (sand) segments visible on white
                ax.plot(curve[:, 0], curve[:, 1], color="#b9b2a3", lw=8.2, solid_capstyle="round")
            ax.plot(curve[:, 0], curve[:, 1], color=cmap(norm(s.shapley)), lw=7,
                    solid_capstyle="round")
            label_colour = "black"
        mx, my = _point_at(curve, 0.5)
        ax.text(mx + 0.18, my + 0.1, s.abbr if s else SEGMENT_TABLE[segment_id].abbr, fontsize=7.5,
                color=label_colour, fontweight="bold" if s is culprit else "normal")
    if e.methods:
        peak = culprit.locations[e.methods[0]].peak
        if peak is not None and culprit.id in TREE_LAYOUT:
            px, py = _point_at(_smooth(TREE_LAYOUT[culprit.id]), peak.arc_mm / culprit.length_mm)
            ax.plot(px, py, "D", ms=10, mfc="white", mec=_CULPRIT_CASING, mew=2.2,
                    label=f"peak of {e.methods[0]}")
            ax.legend(loc="lower left", fontsize=8, frameon=False)
    ax.set_xlim(0.5, 10.5)
    ax.set_ylim(0.3, 9.9)
    ax.set_aspect("equal")
    ax.axis("off")
    ax.set_title(f"Schematic tree (not to scale), culprit {culprit.label}; grey dashed: "
                 "not in this case", fontsize=9)
    fig.colorbar(ScalarMappable(norm=norm, cmap=cmap), cax=cax,
                 label=f"Shapley value ({_target_unit(e)})")
    return fig


def _aorta():
    from matplotlib.patches import FancyBboxPatch

    return FancyBboxPatch((4.55, 8.75), 0.9, 1.0, boxstyle="round,pad=0.08", fc="#eeeeee",
                          ec="#999999", lw=1)


def write_figures(explanation, folder):
    """Write every figure as PNG into ``folder``; return their names relative to it."""
    from pathlib import Path

    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    made = {"contributions.png": contribution_figure(explanation),
            "tree.png": tree_figure(explanation)}
    for method in explanation.methods:
        made[f"culprit_{method}.png"] = culprit_figure(explanation, method)
        made[f"profiles_{method}.png"] = profile_figure(explanation, method)
    for name, fig in made.items():
        fig.savefig(folder / name, dpi=FIGURE_DPI)
    return [f"figures/{name}" for name in made]
