"""How far to trust an explanation: metrics on attribution maps (issue 11, partial)."""

from explain.quality.array_metrics import (
    Score,
    pointing_game,
    relevance_mass_accuracy,
    relevance_rank_accuracy,
)

__all__ = ["Score", "pointing_game", "relevance_mass_accuracy", "relevance_rank_accuracy"]
