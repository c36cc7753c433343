"""How far to trust an explanation: metrics on attribution maps, sanity and stability checks.

Public names
------------
Score, relevance_mass_accuracy, relevance_rank_accuracy, pointing_game
    array_metrics.py: localisation metrics on NumPy arrays.
spearman, stack_ssim
    similarity.py: how alike two maps are (scipy, scikit-image).
cascading_randomisation, SanityResult, PASS_BELOW
    sanity.py: maps under cascading randomisation of the model's layers (Adebayo et al. 2018).
augmentation_stability, StabilityResult
    stability.py: maps, grade and culprit under rotation and centerline jitter.

The sanity and stability modules import torch; they load on first use.
"""

from explain.quality.array_metrics import (
    Score,
    pointing_game,
    relevance_mass_accuracy,
    relevance_rank_accuracy,
)

__all__ = ["Score", "pointing_game", "relevance_mass_accuracy", "relevance_rank_accuracy",
           "spearman", "stack_ssim", "cascading_randomisation", "SanityResult", "PASS_BELOW",
           "augmentation_stability", "StabilityResult"]

_LAZY = {"spearman": "similarity", "stack_ssim": "similarity",
         "cascading_randomisation": "sanity", "SanityResult": "sanity", "PASS_BELOW": "sanity",
         "augmentation_stability": "stability", "StabilityResult": "stability"}


def __getattr__(name):
    if name not in _LAZY:
        raise AttributeError(f"module 'explain.quality' has no attribute {name!r}")
    import importlib

    return getattr(importlib.import_module(f"explain.quality.{_LAZY[name]}"), name)
