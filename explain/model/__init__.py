"""Wrapped patient models: the input convention, splitting at the segment max, loading, targets.

A patient tensor is ``x (B, S, N, H, W) float32 HU``: B patients, S segments in ascending SCCT
number, N cross-sections per segment, H = W pixels. Models normalise inside.
"""

from .load import load_model, load_weights
from .reference import REFERENCE_SPEC, ReferenceNet, build_reference, load_reference
from .spec import CrossSectionSpec, read_spec_file
from .targets import Target, resolve_target
from .wrap import WrappedModel, weights_hash, wrap_model

__all__ = [
    "CrossSectionSpec",
    "REFERENCE_SPEC",
    "ReferenceNet",
    "Target",
    "WrappedModel",
    "build_reference",
    "load_model",
    "load_reference",
    "load_weights",
    "read_spec_file",
    "resolve_target",
    "weights_hash",
    "wrap_model",
]
