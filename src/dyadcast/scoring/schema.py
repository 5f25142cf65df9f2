"""Columns of the accuracy log, shared by the Parquet batches and the `accuracy_rows` table.

`sql/05_schema_accuracy.sql` declares the same columns in the same order (a test checks it), so a batch
can be appended positionally and old Parquet files stay readable by name.
"""

from __future__ import annotations

import pyarrow as pa

QUANTILE_COLUMNS: tuple[str, ...] = ("q050", "q250", "q500", "q750", "q950")
VINTAGES: tuple[str, ...] = ("first_release", "latest")
LEVELS: tuple[str, ...] = ("dyad", "origin_total", "destination_total", "world_total")

ACCURACY_SCHEMA = pa.schema(
    [
        ("batch_id", pa.string()),            # the Parquet file (accuracy_<batch_id>.parquet) holding the row
        ("scored_at", pa.timestamp("us")),    # UTC, naive
        ("run_id", pa.string()),
        ("cutoff", pa.date32()),
        ("model", pa.string()),
        ("run_kind", pa.string()),
        ("as_of", pa.date32()),
        ("run_created_at", pa.timestamp("us")),
        ("level", pa.string()),
        ("origin", pa.string()),
        ("destination", pa.string()),
        ("horizon", pa.int16()),
        ("target_month", pa.date32()),
        ("vintage", pa.string()),             # 'first_release' | 'latest'
        ("actual_vintage_key", pa.string()),  # 'load_id@published_on' (totals: sorted, '+'-joined, or md5:...)
        ("actual_load_id", pa.int64()),       # totals: the highest load among the summed dyads
        ("actual_published_on", pa.date32()),  # totals: the latest publication among the summed dyads
        ("n_cells", pa.int32()),              # dyads summed (1 for a dyad)
        ("actual", pa.float64()),
        ("mean", pa.float64()),
        *[(q, pa.float64()) for q in QUANTILE_COLUMNS],
        ("p_positive", pa.float64()),
        ("error", pa.float64()),              # mean - actual
        ("abs_error", pa.float64()),
        ("sq_error", pa.float64()),
        ("naive_scale", pa.float64()),        # MASE denominator of the run and level (NULL when undefined)
        ("scaled_error", pa.float64()),       # abs_error / naive_scale
        ("poisson_deviance", pa.float64()),
        ("tweedie_deviance", pa.float64()),
        ("tweedie_power", pa.float64()),
        ("deviance_floor", pa.float64()),
        ("covered_50", pa.bool_()),
        ("covered_90", pa.bool_()),
        ("interval_score_50", pa.float64()),
        ("interval_score_90", pa.float64()),
        ("wis", pa.float64()),
        ("wis_dispersion", pa.float64()),
        ("wis_overprediction", pa.float64()),
        ("wis_underprediction", pa.float64()),
        ("predicted_positive", pa.bool_()),   # p_positive >= 0.5
        ("actual_positive", pa.bool_()),
        ("exceeded", pa.bool_()),             # actual > q950
    ]
)
ACCURACY_COLUMNS: tuple[str, ...] = tuple(ACCURACY_SCHEMA.names)
# One accuracy row per key: scoring never writes a second row with the same key.
ROW_KEY: tuple[str, ...] = (
    "run_id", "level", "origin", "destination", "target_month", "vintage", "actual_vintage_key",
)
