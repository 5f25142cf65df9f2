"""Stored runs for the scoring benchmark: cheap copies of one real forecast under other cutoffs and run ids.

Fitting 120 times would take hours at full scale and measure the models, not the scoring; what the scoring
step's cost depends on is how many runs and forecast rows are stored and how many are due. Each copy keeps
the forecast values of the source run, moves its target months to `cutoff + horizon`, and says in its
metadata that it is a benchmark copy.

The source (`source_forecast`) is shaped exactly like a model's snapshot (every dyad and every origin,
destination and world total, per horizon, with the five indexed quantiles) but is computed in one query
from the last three reported months, so seeding costs seconds rather than a model fit. The one exception is
the newest tweedie_gbm run of the workspace the monthly cycle copies: a real fit (`bench/stages.py`), so the
cycle refreshes from a genuine fitted state and boosters as a monthly user's workspace has them.

`monthly_options` gives a model what a monthly run gives it (`cycle.model_options` in the configured mode).
"""

from __future__ import annotations

from collections.abc import Sequence
from datetime import date
from typing import Any

import duckdb
import numpy as np
import pandas as pd

from dyadcast import cycle
from dyadcast.months import add_months, format_month
from dyadcast.snapshots import SnapshotRef, index_snapshot, write_snapshot


def source_forecast(con: duckdb.DuckDBPyConnection, cutoff: date, as_of: date, horizon: int) -> pd.DataFrame:
    """A forecast-shaped frame: 3-month mean as `mean`, Poisson-like spreads as quantiles; totals are sums."""
    dyads = con.sql(
        "SELECT origin, destination, coalesce(avg(arrivals), 0) AS mean FROM actuals_as_of(?) "
        "WHERE month > ? - INTERVAL 3 MONTH AND month <= ? GROUP BY origin, destination",
        params=[as_of, cutoff, cutoff]).df()
    levels = [("dyad", dyads["origin"], dyads["destination"], dyads["mean"].to_numpy())]
    for level, key in (("origin_total", "origin"), ("destination_total", "destination")):
        sums = dyads.groupby(key, as_index=False)["mean"].sum()
        other = pd.Series("*", index=sums.index)
        pair = (sums[key], other) if key == "origin" else (other, sums[key])
        levels.append((level, *pair, sums["mean"].to_numpy()))
    levels.append(("world_total", pd.Series(["*"]), pd.Series(["*"]), np.array([dyads["mean"].sum()])))
    parts = []
    for level, origin, destination, mean in levels:
        spread = np.sqrt(mean)
        for h in range(1, horizon + 1):
            parts.append(pd.DataFrame({
                "level": level, "origin": origin.to_numpy(), "destination": destination.to_numpy(),
                "horizon": np.int16(h), "target_month": pd.Timestamp(add_months(cutoff, h)), "mean": mean,
                "q050": np.maximum(mean - 1.64 * spread, 0), "q250": np.maximum(mean - 0.67 * spread, 0),
                "q500": mean, "q750": mean + 0.67 * spread, "q950": mean + 1.64 * spread,
                "p_positive": 1 - np.exp(-mean)}))
    return pd.concat(parts, ignore_index=True)


def shifted(forecast: pd.DataFrame, cutoff: date) -> pd.DataFrame:
    """The forecast with target months recomputed for `cutoff` (target = cutoff + horizon)."""
    out = forecast.copy()
    targets = {h: pd.Timestamp(add_months(cutoff, int(h))) for h in out["horizon"].unique()}
    out["target_month"] = out["horizon"].map(targets).astype(forecast["target_month"].dtype)
    return out


def plan(newest_cutoff: date, n_runs: int, models: Sequence[str]) -> list[tuple[date, str]]:
    """(cutoff, model) for `n_runs` runs: one per model per month, going back from `newest_cutoff`."""
    return [(add_months(newest_cutoff, -(k // len(models))), models[k % len(models)]) for k in range(n_runs)]


def seed_runs(con: duckdb.DuckDBPyConnection, store: str, forecast: pd.DataFrame,
              runs: Sequence[tuple[date, str]], as_of: dict[date, date]) -> list[SnapshotRef]:
    """Write and index one copy per (cutoff, model); `as_of[cutoff]` is the as-of date recorded for each run."""
    refs = []
    for cutoff, model in runs:
        run_id = f"bench-{format_month(cutoff)}-{model}"
        meta = {"model": model, "run_kind": "monthly", "as_of": as_of[cutoff].isoformat(),
                "horizon": int(forecast["horizon"].max()), "bench_copy": True,
                "note": "benchmark copy of one forecast (bench/seed_runs.py); values are not this model's"}
        ref = write_snapshot(store, cutoff, model, run_id, shifted(forecast, cutoff), meta)
        index_snapshot(con, ref, "monthly", as_of[cutoff])
        refs.append(ref)
    return refs


def copy_scored_state(con: duckdb.DuckDBPyConnection, accuracy_dir: str, templates: dict[str, str],
                      run_ids: Sequence[str], last_actual: date) -> int:
    """Give `run_ids` the accuracy rows, scoring checks and MASE scales a real scoring would have left.

    Why: genuinely scoring 120 full-scale runs costs hours here (bench/README.md), but the monthly scoring
    step's cost depends on the sizes of forecast_rows, accuracy_rows and scoring_checks, not on the values
    in them. So the rows of a genuinely scored template run of the same model (`templates[model]`) are
    copied with each run's id, cutoff and target months, for targets up to `last_actual`; a horizon the
    template has not been scored at reuses its highest scored one. The copies go into one Parquet batch of
    the accuracy log and `accuracy_rows`, like a scoring batch; the scoring checks are the real
    fingerprints from `scoring_due()`, so the scoring step sees these targets as done. Returns rows copied.
    """
    from dyadcast.scoring.store import accuracy_directory, batch_path, new_batch_id

    batch_id = new_batch_id()
    path = batch_path(accuracy_directory(accuracy_dir), batch_id)
    con.execute("CREATE OR REPLACE TEMP TABLE _bench_map AS SELECT r.run_id, r.model, r.cutoff, r.as_of, "
                "r.created_at, t.template_id FROM snapshot_runs AS r JOIN (SELECT unnest(?) AS model, "
                "unnest(?) AS template_id) AS t USING (model) WHERE list_contains(?, r.run_id)",
                [list(templates), list(templates.values()), list(run_ids)])
    con.execute("SET memory_limit = '3GB'")  # streams 54 M rows at full scale; DuckDB's default is 80 % of RAM
    con.execute(
        "INSERT INTO accuracy_rows "
        "WITH reach AS (SELECT run_id, max(horizon) AS top FROM accuracy_rows "
        "               WHERE list_contains(?, run_id) GROUP BY run_id), "
        "horizons AS (SELECT m.*, h.horizon, least(h.horizon, r.top) AS template_horizon FROM _bench_map AS m "
        "             JOIN reach AS r ON r.run_id = m.template_id "
        "             CROSS JOIN (SELECT DISTINCT horizon FROM forecast_rows WHERE list_contains(?, run_id)) AS h "
        "             WHERE CAST(m.cutoff + to_months(h.horizon) AS DATE) <= ?) "
        "SELECT a.* REPLACE (? AS batch_id, h.run_id AS run_id, h.cutoff AS cutoff, h.as_of AS as_of, "
        "       h.created_at AS run_created_at, CAST(h.horizon AS SMALLINT) AS horizon, "
        "       CAST(h.cutoff + to_months(h.horizon) AS DATE) AS target_month) "
        "FROM accuracy_rows AS a JOIN horizons AS h ON a.run_id = h.template_id AND a.horizon = h.template_horizon",
        [list(templates.values()), list(templates.values()), last_actual, batch_id])
    copied = con.execute("SELECT count(*) FROM accuracy_rows WHERE batch_id = ?", [batch_id]).fetchall()[0][0]
    con.execute(f"COPY (SELECT * FROM accuracy_rows WHERE batch_id = '{batch_id}') TO '{path}' "
                "(FORMAT parquet, COMPRESSION zstd)")
    con.execute("INSERT OR REPLACE INTO scoring_checks SELECT run_id, target_month, vintage, fingerprint, now() "
                "FROM scoring_due() WHERE list_contains(?, run_id) AND target_month <= ?", [list(run_ids), last_actual])
    # Only runs with a scored target have a MASE scale; the newest runs get theirs when first scored, as usual.
    con.execute("INSERT OR IGNORE INTO run_naive_scales SELECT m.run_id, s.level, s.naive_scale, s.n_pairs, now() "
                "FROM run_naive_scales AS s JOIN _bench_map AS m ON s.run_id = m.template_id "
                "WHERE m.run_id IN (SELECT DISTINCT run_id FROM accuracy_rows WHERE batch_id = ?)", [batch_id])
    con.execute("DROP TABLE _bench_map")
    con.execute("RESET memory_limit")
    return int(copied)


def monthly_options(con: duckdb.DuckDBPyConnection, name: str, mode: str, cutoff: date) -> tuple[dict[str, Any], str]:
    """`cycle.model_options(con, name, mode, cutoff)`, as a monthly run calls it, and where the options came from
    (recorded with the stage, so a benchmark figure is never mistaken for something a cycle does not do)."""
    cursor = con.cursor()  # its own connection: a fetchone() left open must not block the caller's next query
    try:
        return cycle.model_options(cursor, name, mode, cutoff), "cycle.model_options"
    finally:
        cursor.close()


def mode_of(options: dict[str, Any]) -> str:
    """The mode a model ran in, from the options it was given."""
    if options.get("params"):
        return "refresh"
    return "fit" if options.get("tune") else "n/a (no hyper-parameters)"
