"""Geometry: centerlines, cross-sections along them, and maps put back into the scan.

Public names
------------
Centerline, rotation_minimizing_frames, default_initial_normal
    centerline.py: smooth arc-length parametrisation, resampling, rotation-minimizing frames.
CrossSections, sample_cross_sections
    sampling.py: trilinear cross-sections of a SimpleITK image with every pixel's position.
CaseSections, sample_case
    stack.py: every segment of a case, ascending SCCT number, as one patient tensor.
splat, splat_box, place, SplatBox
    splat.py: per-pixel maps back into a volume (trilinear weights, weighted mean), or into
    the bounding box of the voxels reached, placed in the whole grid only when needed.
"""

from __future__ import annotations

from .centerline import Centerline, default_initial_normal, rotation_minimizing_frames
from .sampling import CrossSections, sample_cross_sections
from .splat import SplatBox, place, splat, splat_box
from .stack import CaseSections, sample_case

__all__ = [
    "CaseSections",
    "Centerline",
    "CrossSections",
    "default_initial_normal",
    "rotation_minimizing_frames",
    "sample_case",
    "sample_cross_sections",
    "splat",
    "splat_box",
    "place",
    "SplatBox",
]
