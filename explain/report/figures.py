"""The report's figures (matplotlib, Agg backend, no pyplot state).

- ``profiles_<method>.png``: the map's profile along every vessel, one row per territory with
  its segments laid end to end, boundaries marked, reference lesions shaded; one y scale.
- ``culprit_<method>.png``: the culprit segment straightened (two longitudinal cuts through its
  cross-section stack, through the peak pixel) and the cross-section at the peak, CT in grey
  with the map over it; one colour scale (raw values) with a colour bar.
- ``contributions.png``: Shapley and leave-one-out contribution of every segment.
- ``tree.png``: a schematic coronary tree of our own drawing coloured by Shapley value.
"""

from __future__ import annotations

import numpy as np
from matplotlib import colormaps
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.cm import ScalarMappable
from matplotlib.colors import Normalize, TwoSlopeNorm
from matplotlib.figure import Figure

from ..anatomy import SEGMENT_TABLE
from .wording import target_phrase, target_unit

__all__ = ["METHOD_UNITS", "FIGURE_DPI", "profile_figure", "culprit_figure",
           "contribution_figure", "tree_figure", "write_figures"]

FIGURE_DPI = 110

#: What one pixel of each method's map measures (captum's conventions).
METHOD_UNITS = {
    "gradient": "target per HU",
    "gradient_x_input": "target units",
    "smoothgrad": "target per HU",
    "integrated_gradients": "target units",
    "gradcam": "target units x activation",
    "occlusion": "drop in target units",
}

#: CT grey window for the straightened views, HU (shows fat, muscle and enhanced lumen).
CT_WINDOW_HU = (-250.0, 650.0)

# Rows of the profile figure: main vessel first, then its branches (proximal to distal order).
_ROWS = (("RCA", (1, 2, 3, 4, 16)), ("LM and LAD", (5, 6, 7, 8, 9, 10)),
         ("LCx", (11, 13, 12, 14, 15, 18)))
_GAP_MM = 4.0
_LESION = "#f2b880"
_LINE = "#1f4e79"


def _new_figure(width, height):
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
    fig = _new_figure(10.0, 1.2 + 1.9 * len(rows))
    axes = fig.subplots(len(rows), 1, sharey=True, squeeze=False)[:, 0]
    top = max((s.locations[method].profile.max() for s in e.segments), default=0.0)
    top = top if top > 0 else 1.0
    for ax, (name, segs) in zip(axes, rows):
        offset = 0.0
        for s in segs:
            loc = s.locations[method]
            x = offset + loc.arc_mm
            for start, end in lesions.get(s.id, ()):
                ax.axvspan(offset + start, offset + end, color=_LESION, alpha=0.6, lw=0)
            ax.plot(x, loc.profile, color=_LINE, lw=1.6)
            if loc.peak is not None:
                ax.plot(offset + loc.peak.arc_mm, loc.peak.value, "v", ms=6,
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
    fig.suptitle(f"{method}: sum of {what} attribution per cross-section ({_units(method, e)})"
                 + ("; shaded: reference lesions" if lesions else ""), fontsize=10)
    fig.tight_layout(rect=(0, 0, 1, 0.97))
    return fig


def _overlay_rgba(values, vmax, signed):
    """Map values to colours whose opacity grows with magnitude.

    Values under 5 % of the scale are fully transparent, so that near-zero attribution (white
    in the diverging scale) cannot be mistaken for bright CT."""
    if signed:
        cmap, norm = colormaps["RdBu_r"], Normalize(-vmax, vmax)
    else:
        cmap, norm = colormaps["plasma"], Normalize(0.0, vmax)
    rgba = cmap(norm(values))
    strength = np.clip((np.abs(values) / vmax - 0.05) / 0.95, 0, 1)
    rgba[..., 3] = 0.9 * strength ** 0.8
    return rgba, ScalarMappable(norm=norm, cmap=cmap)


def culprit_figure(explanation, method):
    """Straightened culprit (two cuts through the peak) and its cross-section at the peak."""
    e = explanation
    s = e.culprit_index
    seg = e.culprit
    cs = e.sections.sections[s]
    ct = np.asarray(cs.values, dtype=np.float64)
    m = np.asarray(e.maps[method][s], dtype=np.float64)
    loc = seg.locations[method]
    n, h, w = ct.shape
    half_w, half_h = (w - 1) / 2 * cs.pixel_mm, (h - 1) / 2 * cs.pixel_mm
    peak = loc.peak
    k, row, col = (peak.index, peak.row, peak.col) if peak is not None else (n // 2, h // 2, w // 2)
    vmax = float(np.abs(m).max()) or 1.0
    signed = bool((m < 0).any())
    arc = cs.arc_mm
    extent_long = (arc[0], arc[-1])

    fig = _new_figure(11.5, 6.2)
    grid = fig.add_gridspec(2, 3, width_ratios=(2.4, 1.0, 0.05), hspace=0.45, wspace=0.22)
    cuts = ((ct[:, row, :].T, m[:, row, :].T, (-half_w, half_w), col,
             f"cut along the in-plane u axis through pixel row {row}"),
            (ct[:, :, col].T, m[:, :, col].T, (-half_h, half_h), row,
             f"cut along the in-plane v axis through pixel column {col}"))
    lesions = _lesions_by_segment(e).get(seg.id, ())
    for r, (ct_cut, map_cut, (lo, hi), pixel, title) in enumerate(cuts):
        ax = fig.add_subplot(grid[r, 0])
        box = (extent_long[0], extent_long[1], lo, hi)
        ax.imshow(ct_cut, cmap="gray", vmin=CT_WINDOW_HU[0], vmax=CT_WINDOW_HU[1],
                  origin="lower", extent=box, aspect="auto", interpolation="nearest")
        rgba, mappable = _overlay_rgba(map_cut, vmax, signed)
        ax.imshow(rgba, origin="lower", extent=box, aspect="auto", interpolation="nearest")
        for start, end in lesions:
            ax.plot([start, end], [lo * 0.92] * 2, color=_LESION, lw=5, solid_capstyle="butt",
                    label="reference lesion")
        if peak is not None:
            offset = (pixel - ((w if r == 0 else h) - 1) / 2) * cs.pixel_mm
            ax.plot(peak.arc_mm, offset, "+", color="#00e5ff", ms=12, mew=2, label="peak")
            ax.plot(list(loc.extent_mm), [hi * 0.92] * 2, color="#00e5ff", lw=3,
                    solid_capstyle="butt", label="half-peak extent")
        ax.set_title(title, fontsize=9)
        ax.set_xlabel("arc length from segment start (mm)")
        ax.set_ylabel("offset (mm)")
        if r == 0:
            handles, labels = ax.get_legend_handles_labels()
            unique = dict(zip(labels, handles))
            fig.legend(unique.values(), unique.keys(), loc="upper left", ncol=3, fontsize=8,
                       frameon=False, bbox_to_anchor=(0.05, 0.945))
    ax = fig.add_subplot(grid[:, 1])
    box = (-half_w, half_w, -half_h, half_h)
    ax.imshow(ct[k], cmap="gray", vmin=CT_WINDOW_HU[0], vmax=CT_WINDOW_HU[1], origin="lower",
              extent=box, interpolation="nearest")
    rgba, mappable = _overlay_rgba(m[k], vmax, signed)
    ax.imshow(rgba, origin="lower", extent=box, interpolation="nearest")
    if peak is not None:
        ax.plot((col - (w - 1) / 2) * cs.pixel_mm, (row - (h - 1) / 2) * cs.pixel_mm, "+",
                color="#00e5ff", ms=14, mew=2)
    ax.set_title(f"cross-section {k} at {arc[k]:.1f} mm", fontsize=9)
    ax.set_xlabel("u (mm)")
    ax.set_ylabel("v (mm)")
    cax = fig.add_subplot(grid[:, 2])
    bar = fig.colorbar(mappable, cax=cax)
    bar.set_label(f"{method} per pixel ({_units(method, e)})", fontsize=9)
    where = "no attribution to locate" if peak is None else (
        f"peak at {peak.arc_mm:.1f} mm, voxel {peak.voxel}")
    fig.suptitle(f"Culprit {seg.label}, {method}: {where}; CT window "
                 f"{CT_WINDOW_HU[0]:g} to {CT_WINDOW_HU[1]:g} HU", fontsize=10)
    fig.subplots_adjust(left=0.06, right=0.9, top=0.86, bottom=0.09)
    return fig


def contribution_figure(explanation):
    """Shapley and leave-one-out contribution per segment (target units)."""
    e = explanation
    segs = e.segments
    fig = _new_figure(7.5, 1.4 + 0.32 * len(segs))
    ax = fig.add_subplot(1, 1, 1)
    y = np.arange(len(segs))[::-1]
    shap = [s.shapley for s in segs]
    loo = [s.leave_one_out for s in segs]
    ax.barh(y + 0.2, shap, height=0.38, color="#2c7fb8", label="Shapley value")
    ax.barh(y - 0.2, loo, height=0.38, color="#bdbdbd", label="leave-one-out")
    stderr = [s.shapley_stderr for s in segs]
    if all(v is not None for v in stderr):
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
    cmap = colormaps["coolwarm"]
    fig = _new_figure(7.0, 6.4)
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
            if s is culprit:
                ax.plot(curve[:, 0], curve[:, 1], color="black", lw=11, solid_capstyle="round")
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
            ax.plot(px, py, "*", ms=16, color="#ffd400", mec="black", mew=1.0,
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
