"""The options each saliency method runs with, recorded in the report's settings."""

from __future__ import annotations

import numpy as np

from ..errors import InputError

__all__ = ["OCCLUSION_WINDOW_MM", "OCCLUSION_WINDOW_PIXELS", "method_settings", "arc_steps",
           "inside_range"]

#: Occlusion window: mm along the arc (converted per segment), pixels x pixels in-plane.
OCCLUSION_WINDOW_MM = 4.0
OCCLUSION_WINDOW_PIXELS = 8


def method_settings(method, shape, *, seed, arc_step_mm=None, range_hu=None):
    """The options each method runs with (recorded in the report's settings).

    Occlusion hides :data:`OCCLUSION_WINDOW_MM` (4 mm) of arc at a time, whatever the segment's
    length: with ``arc_step_mm`` (S,), the spacing of each segment's cross-sections in mm, the
    window becomes ``round(4 mm / step)`` cross-sections on each segment (at least 1, at most N;
    :func:`explain.attribution.occlusion.arc_windows`), slid by half a window along the arc and
    a whole window of :data:`OCCLUSION_WINDOW_PIXELS` pixels (clipped to ``(H, W)``) in-plane.
    The windows and strides are recorded per segment beside the mm they came from. SmoothGrad's
    noise is a share of the HU range of the pixels inside the image
    (:func:`explain.attribution.gradients.inside_range_hu`), given here as ``range_hu``.
    """
    from ..attribution.occlusion import arc_windows

    n, h, w = shape
    if method == "integrated_gradients":
        return {"steps": 50}
    if method == "occlusion":
        if arc_step_mm is None:
            raise InputError("method_settings('occlusion'): needs arc_step_mm, the spacing of "
                             "each segment's cross-sections in mm (explanation.arc_steps)")
        steps = np.asarray(arc_step_mm, dtype=np.float64)
        pixels = (min(OCCLUSION_WINDOW_PIXELS, h), min(OCCLUSION_WINDOW_PIXELS, w))
        windows, strides = arc_windows(OCCLUSION_WINDOW_MM, steps, n, pixels=pixels)
        return {"window_mm": OCCLUSION_WINDOW_MM, "arc_step_mm": [float(v) for v in steps],
                "window": [list(v) for v in windows], "stride": [list(v) for v in strides]}
    if method == "smoothgrad":
        options = {"n": 50, "noise": 0.15, "seed": seed}
        if range_hu is not None:
            options["range_hu"] = [float(v) for v in range_hu]
        return options
    return {}


def arc_steps(sections):
    """Spacing of consecutive cross-sections of each segment, mm: ``(S,)`` float64."""
    return np.array([float(cs.arc_mm[-1] - cs.arc_mm[0]) / max(cs.shape[0] - 1, 1)
                     for cs in sections.sections])


def inside_range(methods, sections, case):
    """HU range of the pixels inside the CT, for SmoothGrad's noise (None when not needed)."""
    if "smoothgrad" not in methods:
        return None
    from ..attribution.gradients import inside_range_hu

    return inside_range_hu(sections.sections, case.image)
