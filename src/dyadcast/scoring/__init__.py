"""Scoring: snapshots + actuals -> the append-only accuracy log (Parquet) and its index `accuracy_rows`.

Call `score_pending(con, accuracy_dir)` after new actuals or snapshots arrive; `score_frame` is the pure
core; `rebuild_accuracy_index` reloads the table from the Parquet files; `metrics` holds the measures.
"""

from dyadcast.scoring.metrics import (
    DEVIANCE_FLOOR,
    TWEEDIE_POWER,
    interval_score,
    poisson_deviance,
    pooled_naive_scale,
    tweedie_deviance,
    weighted_interval_score,
    wis_from_quantiles,
)
from dyadcast.scoring.pending import ScoreResult, score_pending
from dyadcast.scoring.schema import ACCURACY_COLUMNS, ACCURACY_SCHEMA
from dyadcast.scoring.score import ScoringInputError, naive_scales, score_frame
from dyadcast.scoring.store import read_accuracy_log, rebuild_accuracy_index
from dyadcast.scoring.summary import summary_table

__all__ = [
    "ACCURACY_COLUMNS",
    "ACCURACY_SCHEMA",
    "DEVIANCE_FLOOR",
    "TWEEDIE_POWER",
    "ScoreResult",
    "ScoringInputError",
    "interval_score",
    "naive_scales",
    "poisson_deviance",
    "pooled_naive_scale",
    "read_accuracy_log",
    "rebuild_accuracy_index",
    "score_frame",
    "score_pending",
    "summary_table",
    "tweedie_deviance",
    "weighted_interval_score",
    "wis_from_quantiles",
]
