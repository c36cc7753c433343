"""How far to trust an explanation (issue 11): localisation against a reference, where the
attribution mass goes, named flags, faithfulness curves, and the array metrics they use.

Between attribution/mapping and report in the data flow: it reads an
:class:`explain.report.Explanation` and its case, and imports nothing from report.
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
           "QualitySettings", "check_settings"]
