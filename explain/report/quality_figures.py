"""The faithfulness figure of report.html's "How far to trust this" (matplotlib, Agg).

``faithfulness.png``: left, the target as segments are removed in Shapley order and in random
orders (and inserted into the empty patient); right, the target as the culprit's pixels are
deleted in each map's order and in random order (Petsiuk, Das, Saenko 2018). Both in target
units, with v(all) and v(none) marked.
"""

from __future__ import annotations

import numpy as np
from matplotlib import colormaps

from .figures import new_figure

__all__ = ["FAITHFULNESS_FIGURE", "faithfulness_figure"]

FAITHFULNESS_FIGURE = "faithfulness.png"


def _levels(ax, seg):
    for value, name in ((seg["value_all"], "v(all)"), (seg["value_none"], "v(none)")):
        ax.axhline(value, color="#999999", lw=0.8, ls=":")
        ax.annotate(name, (1.0, value), xycoords=("axes fraction", "data"), fontsize=7,
                    color="#666666", ha="right", va="bottom")


def _segment_panel(ax, seg, unit):
    n = len(seg["deletion"]) - 1
    x = np.arange(n + 1)
    ax.plot(x, seg["deletion"], "-o", ms=3, color="#8b1e1e", label="remove, Shapley order")
    ax.plot(x, seg["random_deletion"], "--", color="#8b1e1e", alpha=0.6,
            label="remove, random (mean)")
    ax.plot(x, seg["insertion"], "-o", ms=3, color="#1f4e79", label="insert, Shapley order")
    ax.plot(x, seg["random_insertion"], "--", color="#1f4e79", alpha=0.6,
            label="insert, random (mean)")
    _levels(ax, seg)
    ax.set_xlabel("segments removed / inserted")
    ax.set_ylabel(f"target ({unit})")
    ax.set_title("Segments", fontsize=10)
    ax.legend(fontsize=7, loc="upper center", bbox_to_anchor=(0.5, -0.22), ncol=2)


def _section_panel(ax, sec, seg, unit):
    x = 100.0 * np.asarray(sec["fraction_deleted"])
    colours = colormaps["tab10"]
    first = None
    for n, (method, curves) in enumerate(sec["methods"].items()):
        ax.plot(x, curves["deletion"], "-", color=colours(n), label=f"delete, {method} order")
        first = first or curves
    if first is not None:
        ax.plot(x, first["random_deletion"], "--", color="#444444", label="delete, random order")
    _levels(ax, seg)
    ax.set_xlabel("culprit pixels deleted (%)")
    ax.set_ylabel(f"target ({unit})")
    ax.set_title("Cross-sections of the culprit", fontsize=10)
    ax.legend(fontsize=7, loc="upper center", bbox_to_anchor=(0.5, -0.22), ncol=2)


def faithfulness_figure(faithfulness, unit):
    """The figure, from report.json's ``quality.faithfulness`` and the target's unit name."""
    fig = new_figure(10.0, 4.4)
    left, right = fig.subplots(1, 2)
    seg = faithfulness["segments"]
    _segment_panel(left, seg, unit)
    _section_panel(right, faithfulness["culprit_cross_sections"], seg, unit)
    fig.tight_layout()
    return fig
