"""culprit-lens: explain max-pooled patient-level coronary CT angiography models.

Research tool, not a medical device, not for diagnosis; decisions rest with qualified
clinicians and local rules.

The public names are loaded on first use, so ``import explain`` stays light (torch is only
imported when a model-side name is asked for).
"""

from __future__ import annotations

import importlib

__version__ = "0.1.0"

CAUTION = (
    "Research tool, not a medical device, not for diagnosis. Decisions rest with qualified "
    "clinicians and local rules."
)

# public name -> module that holds it
_NAMES = {
    "CulpritLensError": "errors",
    "InputError": "errors",
    "ModelError": "errors",
    "SegmentInfo": "anatomy",
    "segment_info": "anatomy",
    "CATEGORIES": "grading",
    "cadrads_category": "grading",
    "plaque_burden": "grading",
    "read_image": "io",
    "write_image": "io",
    "Case": "case",
    "Segment": "case",
    "Reference": "case",
    "Lesion": "case",
    "load_case": "case",
    "Centerline": "geometry",
    "CrossSections": "geometry",
    "CaseSections": "geometry",
    "sample_cross_sections": "geometry",
    "sample_case": "geometry",
    "splat": "geometry",
    "phantom": None,
    "CrossSectionSpec": "model",
    "WrappedModel": "model",
    "wrap_model": "model",
    "load_model": "model",
    "SegmentTrace": "attribution",
    "trace_segments": "attribution",
    "attribute": "attribution",
    "METHODS": "attribution",
    "quality": None,
    "Assessment": "quality",
    "assess": "quality",
    "Explanation": "report",
    "explain_case": "report",
    "run_demo": "report",
}

__all__ = sorted(_NAMES) + ["CAUTION", "__version__"]


def __getattr__(name):
    if name not in _NAMES:
        raise AttributeError(f"module 'explain' has no attribute {name!r}")
    module_name = _NAMES[name]
    if module_name is None:
        return importlib.import_module(f"{__name__}.{name}")
    module = importlib.import_module(f"{__name__}.{module_name}")
    return getattr(module, name)


def __dir__():
    return __all__
