"""The scoring step applies its rules in the warehouse (sql/58_scoring_scales.sql, sql/59_scoring_rows.sql);
score_frame and naive_scales state the same rules on pandas frames. Both must give the same rows.

The invented warehouse has what makes scoring tricky: eleven destinations reported by eleven loads (so the
vintage key of a world total is an md5), implied zeros, a revision, a month only some destinations reported
(totals must wait), two runs with different dyad sets, one dyad never reported anywhere, and a training window
shorter than the history.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
from _scoring_warehouse import add_flows, add_run, forecast_frame, new_warehouse

from dyadcast.scoring import score_pending
from dyadcast.scoring.schema import ACCURACY_COLUMNS, ROW_KEY, VINTAGES
from dyadcast.scoring.score import naive_scales, score_frame

ORIGINS = ("QMA", "QMB", "QMC")
DESTINATIONS = tuple(f"XA{c}" for c in "ABCDEFGHIJK")
DYADS = [(o, d) for o in ORIGINS for d in DESTINATIONS]


def _warehouse() -> object:
    rng = np.random.default_rng(11)
    con = new_warehouse()
    history = pd.date_range("2024-07-01", periods=6, freq="MS").strftime("%Y-%m")
    add_flows(con, 1, "2025-01-10", [(o, d, m, int(rng.poisson(3))) for o, d in DYADS for m in history])
    add_run(con, "r-all", "2024-12", "poisson_glm", "2025-01-10", forecast_frame(DYADS, "2024-12", 2, mean=3.0))
    some = [*DYADS[::2], ("QMZ", "XAA")]  # QMZ -> XAA is never reported: it waits as a zero-history dyad
    add_run(con, "r-some", "2024-12", "persistence", "2025-01-10", forecast_frame(some, "2024-12", 2, mean=2.0))
    for k, d in enumerate(DESTINATIONS):  # 2025-01: one load per destination; QMC is never listed (implied 0)
        add_flows(con, 2 + k, f"2025-02-{10 + k:02d}", [(o, d, "2025-01", int(rng.poisson(4))) for o in ORIGINS[:2]])
    add_flows(con, 20, "2025-02-25", [("QMA", "XAB", "2025-01", 50)])  # revision of XAB
    for k, d in enumerate(DESTINATIONS[:4]):  # 2025-02: four destinations only, so most totals wait
        add_flows(con, 30 + k, "2025-03-10", [(o, d, "2025-02", int(rng.poisson(4))) for o in ORIGINS])
    return con


def _reference(con: object, window_start: str) -> tuple[pd.DataFrame, int]:
    """score_frame on the actuals views, with naive_scales on the window's history as published by the as-of."""
    history = con.execute("SELECT * FROM actuals_as_of(DATE '2025-01-10') WHERE month >= ?", [window_start]).df()
    scope = con.execute("SELECT DISTINCT run_id, origin, destination FROM forecast_rows WHERE level = 'dyad'").df()
    scales = naive_scales(history, scope)
    forecasts = con.execute("SELECT f.*, r.as_of, r.created_at AS run_created_at FROM forecast_rows AS f "
                            "JOIN snapshot_runs AS r USING (run_id)").df()
    parts, incomplete = [], 0
    for vintage, view in zip(VINTAGES, ("actuals_first_release", "actuals_latest"), strict=True):
        actuals = con.execute(f"SELECT * FROM {view} WHERE month >= DATE '2025-01-01'").df()
        rows = score_frame(forecasts, actuals, vintage=vintage, naive_scales=scales)
        incomplete += rows.attrs["totals_incomplete"]
        parts.append(rows)
    return pd.concat(parts, ignore_index=True), incomplete


def _tidy(frame: pd.DataFrame) -> pd.DataFrame:
    out = frame.drop(columns=["batch_id", "scored_at"]).sort_values(list(ROW_KEY)).reset_index(drop=True)
    for col in ("cutoff", "as_of", "target_month", "actual_published_on", "run_created_at"):
        out[col] = pd.to_datetime(out[col]).astype("datetime64[us]")
    for col in ("horizon", "n_cells", "actual_load_id"):
        out[col] = out[col].astype("int64")
    for col in out.columns:
        if out[col].dtype == object or str(out[col].dtype).startswith("str"):
            out[col] = out[col].astype(str)
    return out


def test_warehouse_rows_equal_the_pandas_rules(tmp_path: Path) -> None:
    con = _warehouse()
    # window 2 + horizon 2 months before the 2024-12 cutoff: 2024-08 on; the July history is left out
    result = score_pending(con, tmp_path / "accuracy", training_window_months=2)
    expected, incomplete = _reference(con, "2024-08-01")
    got = con.execute(f"SELECT {', '.join(ACCURACY_COLUMNS)} FROM accuracy_rows").df()
    assert len(got) == result.rows_written == len(expected) > 0
    assert result.totals_incomplete == incomplete > 0
    assert got["actual_vintage_key"].str.startswith("md5:").any()  # the world total of eleven loads
    assert set(got.loc[got["origin"] == "QMZ", "actual"]) == {0.0}  # reported destination, not listed: zero
    pd.testing.assert_frame_equal(_tidy(got), _tidy(expected), check_exact=False, rtol=1e-12)


def test_warehouse_scales_equal_the_pandas_rules() -> None:
    con = _warehouse()
    got = con.execute("SELECT * FROM scoring_scales(DATE '2025-01-10', DATE '2024-08-01', DATE '2024-12-01', "
                      "['r-all', 'r-some', 'r-none']) ORDER BY run_id, level").df()
    history = con.execute("SELECT * FROM actuals_as_of(DATE '2025-01-10') WHERE month >= DATE '2024-08-01'").df()
    scope = con.execute("SELECT DISTINCT run_id, origin, destination FROM forecast_rows WHERE level = 'dyad'").df()
    expected = naive_scales(history, scope, run_ids=["r-none"]).sort_values(["run_id", "level"])
    pd.testing.assert_frame_equal(got.reset_index(drop=True), expected.reset_index(drop=True), check_dtype=False)
    # 2024-08 .. 2024-12: four steps per series; 11 destination, 33 dyad, 3 origin series and the world
    assert got.loc[got["run_id"] == "r-all", "n_pairs"].tolist() == [11 * 4, 33 * 4, 3 * 4, 4]
