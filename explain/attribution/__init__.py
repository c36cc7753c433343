"""Attributions: tracing a patient's grade to its segments, and saliency on cross-sections.

Public names
------------
trace_segments, SegmentTrace
    trace.py: winners of the pooled channels, gradient routing, leave-one-out, Shapley values.
attribute, METHODS
    api.py: gradient, gradient_x_input, smoothgrad, integrated_gradients, gradcam, occlusion.
SegmentLocal
    local.py: one segment's input with the other segments' features held fixed.
rotation_average, rotate_back, case_resampler, RotationAverage
    rotation.py: maps averaged over rotations of the cross-sections, with Spearman agreement.
"""

from .api import METHODS, attribute
from .local import SegmentLocal
from .rotation import RotationAverage, case_resampler, rotate_back, rotation_average
from .trace import SegmentTrace, exact_shapley, trace_segments

__all__ = [
    "METHODS",
    "RotationAverage",
    "SegmentLocal",
    "SegmentTrace",
    "attribute",
    "case_resampler",
    "exact_shapley",
    "rotate_back",
    "rotation_average",
    "trace_segments",
]
