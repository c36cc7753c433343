"""The figures say what their numbers are: per mm of arc, the case's own grey window, units.

References: the median of the lumen's pixels computed here with numpy (the window's rule, stated
in docs/report-format.md, is our own choice: common practice, no source); the Grad-CAM channel
weight d target / d activation times an activation is in target units (Selvaraju et al. 2017).
"""

from __future__ import annotations

import numpy as np

from explain.report.figures import METHOD_UNITS, culprit_figure, profile_figure


def _texts(fig):
    out = [fig._suptitle.get_text() if fig._suptitle else ""]
    if fig._supylabel is not None:
        out.append(fig._supylabel.get_text())
    for ax in fig.axes:
        out += [ax.get_title(), ax.get_xlabel(), ax.get_ylabel(), *(t.get_text() for t in ax.texts)]
    return " | ".join(out)


def test_culprit_figure_shares_one_arc_axis_and_states_the_case_window(synthetic_explanation):
    e = synthetic_explanation
    fig = culprit_figure(e, "integrated_gradients")
    ct = np.asarray(e.sections.sections[e.culprit_index].values, dtype=np.float64)
    n, h, w = ct.shape
    lumen = float(np.median(ct[:, h // 2 - 1:h // 2 + 2, w // 2 - 1:w // 2 + 2]))
    text = _texts(fig)
    assert f"grey window {-0.4 * lumen:.0f} to {1.25 * lumen:.0f} HU" in text
    assert "-250" not in text and "650" not in text
    assert "per mm of arc" in text
    # profile on top and the straightened cut under it share the arc axis (mm)
    arc = e.sections.sections[e.culprit_index].arc_mm
    profile_ax = fig.axes[0]
    cut_ax = [ax for ax in fig.axes if ax.get_xlabel().startswith("arc length")][0]
    assert profile_ax.get_shared_x_axes().joined(profile_ax, cut_ax)
    assert np.allclose(cut_ax.get_xlim(), (arc[0], arc[-1]))
    # the peak cross-section inset is titled with its arc position
    peak = e.culprit.locations["integrated_gradients"].peak
    assert f"cross-section {peak.index} at {arc[peak.index]:.1f} mm" in text


def test_profiles_are_per_mm_of_arc(synthetic_explanation):
    fig = profile_figure(synthetic_explanation, "occlusion")
    text = _texts(fig)
    assert "per mm of arc" in text and "per cross-section" not in text
    # the plotted curve of the culprit is its per-section sum over the cross-section spacing
    loc = synthetic_explanation.culprit.locations["occlusion"]
    step = np.diff(loc.arc_mm).mean()
    tops = [line.get_ydata().max() for ax in fig.axes for line in ax.get_lines()
            if len(line.get_ydata()) == loc.profile.size]
    assert any(np.isclose(t, loc.profile.max() / step) for t in tops)


def test_gradcam_is_in_target_units():
    assert METHOD_UNITS["gradcam"] == "target units"
