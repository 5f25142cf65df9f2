"""Warehouse -> feature frame: the one way training, forecasting and backtests get their rows.

The set work (visible vintages, the winning vintage of each cell, the dyad universe, attributes) runs in
DuckDB table macros under `sql/20_* .. 30_*`, parametrised by the as-of date and the cutoff, so a backtest at
an old cutoff sees exactly what had been published then. The windows over months (lags, rolling means,
totals, targets) are array slices on the dense dyad x month grid (`dyadcast.grid`), the same columns the SQL
macro `dyad_features` (sql/40_01) gives analysts. Python also adds the country-level columns whose names come
from the data (push / pull indicators, organic signals).
"""

from __future__ import annotations

import time
from dataclasses import dataclass, field
from datetime import date

import duckdb
import numpy as np
import pandas as pd
import pyarrow as pa

from dyadcast import signals
from dyadcast.config import SignalConfig
from dyadcast.grid import MONTHS_SINCE_POSITIVE_CAP, anchor_dates, history_grid
from dyadcast.months import format_month, month_starts

KEYS = ["origin", "destination", "month"]
HISTORY = [
    *(f"lag_{k}" for k in range(1, 13)),
    "roll_mean_3", "roll_mean_6", "roll_mean_12", "months_since_positive", "origin_share_12",
    "origin_outflow_lag_1", "origin_outflow_roll_3", "destination_inflow_lag_1", "destination_inflow_roll_3",
]
ATTRIBUTES = ["log_distance", "contiguous", "common_language", "colonial_tie", "log_diaspora"]


class FeatureError(ValueError):
    """The warehouse cannot give features for the requested cutoff / as-of; the message says what to load."""


@dataclass
class FeatureSet:
    frame: pd.DataFrame  # one row per dyad x anchor month t <= cutoff
    feature_names: list[str]
    target_names: list[str]  # target_1 .. target_H
    metadata: dict = field(default_factory=dict)  # signal lag/window and evidence, counts, build time

    def forecast_rows(self) -> pd.DataFrame:
        """Rows of the cutoff month: the ones a model predicts from."""
        last = self.frame["month"].max()
        return self.frame[self.frame["month"] == last]


def _as_date(day: date, name: str) -> date:
    if not isinstance(day, date):
        raise FeatureError(f"{name} = {day!r}: pass a datetime.date")
    return date(day.year, day.month, day.day)


def _first_of_month(day: date, name: str) -> date:
    return _as_date(day, name).replace(day=1)


def _check_inputs(cutoff: date, as_of: date, horizon: int, start: date | None) -> None:
    if not 1 <= horizon <= 24:
        raise FeatureError(f"horizon = {horizon}: use a whole number of months from 1 to 24")
    if start is not None and start > cutoff:
        raise FeatureError(f"start = {format_month(start)} is after cutoff = {format_month(cutoff)}: move start back")
    if as_of < cutoff:
        raise FeatureError(
            f"as_of = {as_of} is before the first day of cutoff month {format_month(cutoff)}: nothing about that "
            "month can have been published; use a later as-of date or an earlier cutoff"
        )


def _country_columns(
    long: pd.DataFrame, codes: np.ndarray, dictionary: list[str], months: np.ndarray, first: int, n_months: int
) -> dict[str, np.ndarray]:
    """Spread a small (country, month, name, value) table onto the frame rows by lookup, without a join."""
    if long.empty:
        return {}
    names = sorted(long["name"].unique())
    position = {c: i for i, c in enumerate(dictionary)}
    country = long["country"].map(position).fillna(-1).to_numpy(dtype=np.int64)
    month = pd.to_datetime(long["month"])
    mi = (month.dt.year * 12 + month.dt.month - 1 - first).to_numpy()
    ni = pd.Categorical(long["name"], categories=names).codes
    ok = (country >= 0) & (mi >= 0) & (mi < n_months)
    cube = np.full((len(names), len(dictionary), n_months), np.nan)
    cube[ni[ok], country[ok], mi[ok]] = long["value"].to_numpy(dtype=float)[ok]
    return {name: cube[j][codes, months] for j, name in enumerate(names)}


def _indicators(con: duckdb.DuckDBPyConnection, macro: str, prefix: str, as_of: date, cutoff: date) -> pd.DataFrame:
    rows = con.sql(f"SELECT country, month, indicator, value FROM {macro}(?, ?)", params=[as_of, cutoff]).df()
    return pd.DataFrame({
        "country": rows["country"], "month": rows["month"],
        "name": prefix + rows["indicator"].astype(str), "value": rows["value"],
    })


def build_features(
    con: duckdb.DuckDBPyConnection,
    cutoff: date,
    as_of: date,
    horizon: int = 6,
    signal_config: SignalConfig | None = None,
    start: date | None = None,
) -> FeatureSet:
    """Feature frame for a run with cutoff month `cutoff`, seeing only rows published on or before `as_of`.

    `start` limits the anchor months (a training window); history before it still feeds lags and means.
    Columns and their meaning: DEVELOPERS.md, "Features".
    """
    began = time.perf_counter()
    cutoff, as_of = _first_of_month(cutoff, "cutoff"), _as_date(as_of, "as_of")
    start = None if start is None else _first_of_month(start, "start")
    _check_inputs(cutoff, as_of, horizon, start)
    grid = history_grid(con, as_of, cutoff, horizon, start)
    if grid is None:
        window = "" if start is None else f" from start = {format_month(start)}"
        raise FeatureError(
            f"no flows published on or before {as_of} report a month up to {format_month(cutoff)}{window}; "
            "load flows files first or choose a later as-of date"
        )
    targets, origins, destinations = grid.targets, grid.origins, grid.destinations
    n_months = grid.n_anchors
    origin_codes = np.repeat(grid.origin_code, n_months)
    destination_codes = np.repeat(grid.destination_code, n_months)
    rel = np.tile(np.arange(n_months), grid.n_dyads)
    months = anchor_dates(grid)
    first = grid.first_anchor
    outflow = grid.outflow  # training outflow for the signal choice
    push = _indicators(con, "push_indicators", "push_", as_of, cutoff)
    pull = _indicators(con, "pull_indicators", "pull_", as_of, cutoff)
    signal_long, evidence = signals.signal_features(
        con, as_of, cutoff, months, signal_config or SignalConfig(), origins, outflow
    )
    push_cols = _country_columns(push, origin_codes, origins, rel, first, n_months)
    pull_cols = _country_columns(pull, destination_codes, destinations, rel, first, n_months)
    signal_cols = _country_columns(signal_long, origin_codes, origins, rel, first, n_months)

    target_names = [f"target_{h}" for h in range(1, horizon + 1)]
    feature_names = [*HISTORY, *push_cols, *pull_cols, *ATTRIBUTES, "calendar_month", *signal_cols]
    computed = {**push_cols, **pull_cols, **signal_cols, **dict(zip(target_names, targets, strict=True))}
    month_numbers = first + rel
    computed["month"] = pa.array(month_starts(month_numbers))
    computed["calendar_month"] = month_numbers % 12 + 1
    dyad_rows = np.repeat(np.arange(grid.n_dyads), n_months)
    computed["origin"] = grid.origin_names.take(dyad_rows)
    computed["destination"] = grid.destination_names.take(dyad_rows)
    computed.update(grid.columns)
    # One Arrow table in the final column order, converted to pandas once (buffers freed as they go).
    final = pa.table({name: computed[name] for name in [*KEYS, *feature_names, *target_names]})
    rows_with_target_1 = int(np.isfinite(targets[0]).sum())
    del computed, push_cols, pull_cols, signal_cols, grid, targets
    frame = final.to_pandas(split_blocks=True, self_destruct=True)
    del final

    metadata = {
        "cutoff": format_month(cutoff),
        "as_of": as_of.isoformat(),
        "horizon": horizon,
        "start": None if start is None else format_month(start),
        "first_anchor_month": format_month(months[0]),
        "rows": int(len(frame)),
        "dyads": len(origin_codes) // len(months),
        "anchor_months": len(months),
        "forecast_rows": int((rel == n_months - 1).sum()),
        "rows_with_target_1": rows_with_target_1,
        "push_columns": [n for n in feature_names if n.startswith("push_")],
        "pull_columns": [n for n in feature_names if n.startswith("pull_")],
        "signals": evidence,
        "months_since_positive_cap": MONTHS_SINCE_POSITIVE_CAP,
        "build_seconds": round(time.perf_counter() - began, 3),
    }
    return FeatureSet(frame, feature_names, target_names, metadata)
