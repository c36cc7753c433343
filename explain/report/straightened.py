"""The culprit figure: profile along the arc, one straightened cut under it, the peak inset.

Layout, top to bottom on one shared arc axis (mm from the segment's start):

1. the map's profile as attribution per mm of arc, with the half-peak extent as a band, the
   reference lesions (when the case has them) as hatched spans, and the peak marked;
2. one straightened cut through the cross-section stack along the in-plane u axis, through the
   peak pixel's row: CT in grey with the map over it;
3. the cross-section at the peak as an inset above the cut, tied by a line to its place on the
   arc axis.

The grey scale comes from the case (:func:`display_window`), not from a fixed preset, and the
figure's title states it.
"""

from __future__ import annotations

import numpy as np
from matplotlib import colormaps
from matplotlib.cm import ScalarMappable
from matplotlib.colors import Normalize
from matplotlib.patches import ConnectionPatch

__all__ = ["LUMEN_WINDOW", "display_window", "culprit_figure"]

#: The display window as multiples of the lumen's median HU (low, high). Our own choice (common
#: practice, no source): with a lumen of 350 HU it spans -140 to 440 HU, so fat reads dark,
#: soft plaque mid grey and the enhanced lumen bright; it follows the contrast of each scan.
LUMEN_WINDOW = (-0.4, 1.25)

_MARK = "#0b7a75"      # peak and extent: a teal of our own
_LESION = "#b5651d"    # reference lesions: hatched rust
_LINE = "#2d2a6e"


def display_window(values, *, centre=1):
    """Grey window (low, high) HU for one segment, from its lumen's HU along the arc.

    Parameters
    ----------
    values : (N, H, W) array_like, HU
        The segment's cross-sections.
    centre : int
        Half-size of the central square taken as lumen: ``2 centre + 1`` pixels per side.

    Returns
    -------
    low, high : float
        HU; :data:`LUMEN_WINDOW` times the median of the central pixels over all
        cross-sections. Where that median is under 50 HU (no enhanced lumen), the 2nd to 98th
        percentiles of all pixels instead.
    lumen_hu : float
        The lumen's median HU.

    Examples
    --------
    >>> stack = np.full((4, 5, 5), -80.0); stack[:, 1:4, 1:4] = 350.0
    >>> display_window(stack)
    (-140.0, 437.5, 350.0)
    """
    v = np.asarray(values, dtype=np.float64)
    n, h, w = v.shape
    core = v[:, max(h // 2 - centre, 0):h // 2 + centre + 1, max(w // 2 - centre, 0):w // 2 + centre + 1]
    lumen = float(np.median(core))
    if lumen >= 50.0:
        return LUMEN_WINDOW[0] * lumen, LUMEN_WINDOW[1] * lumen, lumen
    low, high = (float(q) for q in np.percentile(v, [2, 98]))
    return low, max(high, low + 1.0), lumen


def _overlay_rgba(values, vmax, signed):
    """Colours whose opacity grows with magnitude; under 5 % of the scale fully transparent."""
    if signed:
        cmap, norm = colormaps["PuOr_r"], Normalize(-vmax, vmax)
    else:
        cmap, norm = colormaps["magma"], Normalize(0.0, vmax)
    rgba = cmap(norm(values))
    strength = np.clip((np.abs(values) / vmax - 0.05) / 0.95, 0, 1)
    rgba[..., 3] = 0.85 * strength ** 0.8
    return rgba, ScalarMappable(norm=norm, cmap=cmap)


def _lesions(explanation, segment_id):
    ref = getattr(explanation.case, "reference", None)
    return [(les.start_mm, les.end_mm) for les in (() if ref is None else ref.lesions)
            if int(les.segment) == segment_id]


def _profile_panel(ax, loc, lesions, units):
    """Attribution per mm of arc along the culprit, extent band, lesions, peak."""
    per_mm = loc.per_mm
    for start, end in lesions:
        ax.axvspan(start, end, facecolor="none", edgecolor=_LESION, hatch="////", lw=0,
                   label="reference lesion")
    if loc.peak is not None:
        ax.axvspan(*loc.extent_mm, color=_MARK, alpha=0.15, lw=0, label="half-peak extent")
        ax.plot(loc.peak.arc_mm, per_mm[loc.peak.index], "D", ms=7, mfc="white", mec=_MARK,
                mew=2, label="peak")
    ax.plot(loc.arc_mm, per_mm, color=_LINE, lw=1.8)
    ax.axhline(0, color="#999999", lw=0.6)
    ax.set_ylabel(f"per mm of arc\n({units} / mm)", fontsize=8.5)
    ax.spines[["top", "right"]].set_visible(False)
    ax.tick_params(labelbottom=False)
    handles, labels = ax.get_legend_handles_labels()
    unique = dict(zip(labels, handles))
    ax.legend(unique.values(), unique.keys(), fontsize=7.5, frameon=False, loc="upper left")


def _cut_panel(ax, cs, ct, m, row, window, vmax, signed):
    """One straightened cut along u through pixel row ``row``; returns the colour mappable."""
    n, h, w = ct.shape
    half_w = (w - 1) / 2 * cs.pixel_mm
    box = (cs.arc_mm[0], cs.arc_mm[-1], -half_w, half_w)
    ax.imshow(ct[:, row, :].T, cmap="gray", vmin=window[0], vmax=window[1], origin="lower",
              extent=box, aspect="auto", interpolation="nearest")
    rgba, mappable = _overlay_rgba(m[:, row, :].T, vmax, signed)
    ax.imshow(rgba, origin="lower", extent=box, aspect="auto", interpolation="nearest")
    ax.set_xlabel("arc length from the segment's start (mm)")
    ax.set_ylabel("u offset (mm)", fontsize=8.5)
    ax.text(0.008, 0.04, f"straightened cut along u through pixel row {row}", fontsize=8,
            transform=ax.transAxes, bbox={"fc": "white", "ec": "none", "alpha": 0.8, "pad": 2})
    return mappable


def _inset(fig, ax_prof, ax_cut, cs, ct, m, k, peak, window, vmax, signed):
    """The cross-section at ``k`` above the cut, joined to its arc position."""
    n, h, w = ct.shape
    half = ((w - 1) / 2 * cs.pixel_mm, (h - 1) / 2 * cs.pixel_mm)
    arc = cs.arc_mm
    frac = (arc[k] - arc[0]) / max(arc[-1] - arc[0], 1e-9)
    x0, x1 = ax_cut.get_position().x0, ax_cut.get_position().x1
    width = 0.17
    left = float(np.clip(x0 + frac * (x1 - x0) - width / 2, x0, x1 - width))  # over the peak
    ax = fig.add_axes((left, 0.405, width, 0.2))
    box = (-half[0], half[0], -half[1], half[1])
    ax.imshow(ct[k], cmap="gray", vmin=window[0], vmax=window[1], origin="lower", extent=box,
              interpolation="nearest")
    ax.imshow(_overlay_rgba(m[k], vmax, signed)[0], origin="lower", extent=box,
              interpolation="nearest")
    if peak is not None:
        ax.plot((peak.col - (w - 1) / 2) * cs.pixel_mm, (peak.row - (h - 1) / 2) * cs.pixel_mm,
                "D", ms=6, mfc="none", mec=_MARK, mew=1.8)
    ax.set_title(f"cross-section {k} at {arc[k]:.1f} mm", fontsize=7.5)
    ax.tick_params(labelsize=6.5)
    ax.locator_params(nbins=3)
    for spine in ax.spines.values():
        spine.set_edgecolor(_MARK)
        spine.set_linewidth(1.5)
    ax_cut.axvline(arc[k], color=_MARK, lw=1.0, ls=(0, (4, 2)))
    ax_prof.axvline(arc[k], color=_MARK, lw=0.8, ls=(0, (4, 2)))
    fig.add_artist(ConnectionPatch(xyA=(0.5, 0.0), coordsA=ax.transAxes,
                                   xyB=(arc[k], ax_cut.get_ylim()[1]), coordsB=ax_cut.transData,
                                   color=_MARK, lw=1.2))


def culprit_figure(explanation, method, *, units="attribution"):
    """The culprit segment along its arc: profile, straightened cut and the peak inset."""
    from .figures import new_figure

    e = explanation
    s, seg = e.culprit_index, e.culprit
    cs = e.sections.sections[s]
    ct = np.asarray(cs.values, dtype=np.float64)
    m = np.asarray(e.maps[method][s], dtype=np.float64)
    loc = seg.locations[method]
    n, h, w = ct.shape
    peak = loc.peak
    k, row = (peak.index, peak.row) if peak is not None else (n // 2, h // 2)
    vmax = float(np.abs(m).max()) or 1.0
    signed = bool((m < 0).any())
    low, high, lumen = display_window(ct)

    fig = new_figure(10.5, 7.4)
    grid = fig.add_gridspec(3, 2, height_ratios=(1.0, 0.9, 1.1), width_ratios=(1.0, 0.025),
                            hspace=0.08, wspace=0.03, left=0.08, right=0.9, top=0.9, bottom=0.08)
    ax_prof = fig.add_subplot(grid[0, 0])
    ax_cut = fig.add_subplot(grid[2, 0], sharex=ax_prof)
    _profile_panel(ax_prof, loc, _lesions(e, seg.id), units)
    mappable = _cut_panel(ax_cut, cs, ct, m, row, (low, high), vmax, signed)
    ax_prof.set_xlim(cs.arc_mm[0], cs.arc_mm[-1])
    _inset(fig, ax_prof, ax_cut, cs, ct, m, k, peak, (low, high), vmax, signed)
    bar = fig.colorbar(mappable, cax=fig.add_subplot(grid[2, 1]))
    bar.set_label(f"{method} per pixel\n({units})", fontsize=8)
    where = "no attribution to locate" if peak is None else (
        f"peak at {peak.arc_mm:.1f} mm, voxel {peak.voxel}")
    fig.suptitle(f"Culprit {seg.label}, {method}: {where}\ngrey window {low:.0f} to {high:.0f} HU "
                 f"({LUMEN_WINDOW[0]:g} to {LUMEN_WINDOW[1]:g} x the lumen's median "
                 f"{lumen:.0f} HU along this segment)", fontsize=9.5)
    return fig
