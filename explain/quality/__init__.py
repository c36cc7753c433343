"""How far to trust an explanation: localisation against a reference, where the attribution
mass goes, named flags, faithfulness curves, sanity and stability checks, and the array metrics
they use.

Between attribution/mapping and report in the data flow: it reads an
:class:`explain.report.Explanation` and its case, and imports nothing from report.

Public names
------------
Score, relevance_mass_accuracy, relevance_rank_accuracy, pointing_game
    array_metrics.py: localisation metrics on NumPy arrays.
assess, Assessment, localisation, FLAG_ORDER, FLAG_THRESHOLDS, QualitySettings, check_settings
    the per-report quality object (assessment.py, localisation.py, flags.py, settings.py).
spearman, stack_ssim
    similarity.py: how alike two maps are (scipy, scikit-image).
cascading_randomisation, SanityResult, PASS_BELOW
    sanity.py: maps under cascading randomisation of the model's layers (Adebayo et al. 2018).
augmentation_stability, StabilityResult
    stability.py: maps, grade and culprit under rotation and centerline jitter.

The sanity and stability modules load on first use.
"""

from explain.quality.array_metrics import (
    Score,
    pointing_game,
    relevance_mass_accuracy,
    relevance_rank_accuracy,
)
from explain.quality.assessment import Assessment, assess
from explain.quality.flags import FLAG_ORDER
from explain.quality.localisation import localisation
from explain.quality.settings import FLAG_THRESHOLDS, QualitySettings, check_settings

__all__ = ["Score", "pointing_game", "relevance_mass_accuracy", "relevance_rank_accuracy",
           "Assessment", "assess", "localisation", "FLAG_ORDER", "FLAG_THRESHOLDS",
           "QualitySettings", "check_settings",
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
