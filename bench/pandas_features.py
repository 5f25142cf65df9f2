"""The dyad-level feature frame written the straightforward pandas way, as a yardstick for the SQL views.

Why it exists: `make bench` reports how much the DuckDB table macros (sql/20_* .. 40_01) save against what a
careful analyst would write in pandas: load the raw rows, pick the winning vintage per (destination, month),
spread it over the dyad universe (implied zeros), then groupby + shift + rolling. It follows the contract
of DEVELOPERS.md ("Vintage semantics", "Features") and the column meanings of sql/40_01_dyad_features.sql,
so the benchmark can also check that both give the same values.

It covers the columns of the `dyad_features` macro (not the push / pull / signal columns, which
`dyadcast.features` adds in Python after the macro in both cases). Targets come as `target_1 .. target_H`.
"""

from __future__ import annotations

from datetime import date

import duckdb
import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc

from dyadcast.grid import HistoryGrid
from dyadcast.months import month_starts

KEYS = ["origin", "destination", "month"]
DYAD = ["origin", "destination"]
CAP = 120  # months_since_positive cap of sql/40_01_dyad_features.sql


def load_raw(con: duckdb.DuckDBPyConnection) -> dict[str, pd.DataFrame]:
    """The raw tables as pandas frames: the baseline starts from the same rows as the SQL."""
    return {
        "flows": con.sql("SELECT load_id, published_on, origin, destination, month, arrivals FROM raw_flows").df(),
        "attributes": con.sql("SELECT * FROM raw_dyad_attributes").df(),
    }


def visible(frame: pd.DataFrame, as_of: date) -> pd.DataFrame:
    return frame[frame["published_on"] <= pd.Timestamp(as_of)]


def dense_panel(raw: dict[str, pd.DataFrame], cutoff: date, as_of: date) -> pd.DataFrame:
    """Every dyad of the universe x every month up to the cutoff; arrivals NaN where no vintage reports."""
    flows = visible(raw["flows"], as_of)
    attrs = visible(raw["attributes"], as_of)
    cells = flows[["destination", "month", "load_id", "published_on"]].drop_duplicates()
    winners = cells.sort_values(["published_on", "load_id"]).drop_duplicates(["destination", "month"], keep="last")
    listed = (flows.merge(winners, on=["destination", "month", "load_id", "published_on"])
              .groupby(KEYS, as_index=False)["arrivals"].sum())
    universe = pd.concat([flows[DYAD], attrs[DYAD]]).drop_duplicates()
    months = pd.DataFrame({"month": pd.date_range(flows["month"].min(), pd.Timestamp(cutoff), freq="MS")})
    grid = universe.merge(months, how="cross")
    reported = winners[["destination", "month"]].assign(reported=True)
    grid = grid.merge(reported, on=["destination", "month"], how="left")
    grid = grid.merge(listed, on=KEYS, how="left")
    grid["arrivals"] = np.where(grid["reported"].notna(), grid["arrivals"].fillna(0.0), np.nan)
    return grid.drop(columns="reported").sort_values(KEYS, ignore_index=True)


def _rolling(grouped: pd.core.groupby.SeriesGroupBy, window: int, how: str) -> np.ndarray:
    rolled = getattr(grouped.rolling(window, min_periods=1), how)()
    return rolled.to_numpy()  # the panel is sorted by dyad then month, as the grouped result is


def _country_totals(panel: pd.DataFrame, side: str) -> pd.DataFrame:
    """Monthly sum over the other side of the dyad (NaN when nothing is reported) and its 3-month mean."""
    totals = panel.groupby([side, "month"], as_index=False)["arrivals"].sum(min_count=1)
    totals = totals.sort_values([side, "month"], ignore_index=True)
    totals["roll_3"] = totals.groupby(side)["arrivals"].rolling(3, min_periods=1).mean().to_numpy()
    return totals


def dyad_features(panel: pd.DataFrame, attrs: pd.DataFrame, horizon: int, start: date | None) -> pd.DataFrame:
    """The columns of sql/40_01_dyad_features.sql for anchor months >= start, from a dense sorted panel."""
    out = panel[KEYS].copy()
    y = panel["arrivals"]
    by_dyad = y.groupby([panel["origin"], panel["destination"]], sort=False)
    for k in range(1, 13):
        out[f"lag_{k}"] = by_dyad.shift(k - 1)
    for w in (3, 6, 12):
        out[f"roll_mean_{w}"] = _rolling(by_dyad, w, "mean")

    positive_month = panel["month"].where(y > 0)
    last_positive = positive_month.groupby([panel["origin"], panel["destination"]], sort=False).ffill()
    gap = ((panel["month"].dt.year - last_positive.dt.year) * 12
           + panel["month"].dt.month - last_positive.dt.month)
    out["months_since_positive"] = gap.clip(upper=CAP).fillna(CAP).astype(float)

    outflow = _country_totals(panel, "origin")
    inflow = _country_totals(panel, "destination")
    with_out = panel.merge(outflow.rename(columns={"arrivals": "outflow", "roll_3": "outflow_roll_3"}),
                           on=["origin", "month"], how="left")
    with_in = panel.merge(inflow.rename(columns={"arrivals": "inflow", "roll_3": "inflow_roll_3"}),
                          on=["destination", "month"], how="left")
    own_12 = _rolling(by_dyad, 12, "sum")  # NaN when no month of the window is reported
    reported_outflow = with_out["outflow"].where(y.notna())
    denominator = _rolling(reported_outflow.groupby([panel["origin"], panel["destination"]], sort=False), 12, "sum")
    out["origin_share_12"] = own_12 / np.where(denominator == 0, np.nan, denominator)
    out["origin_outflow_lag_1"] = with_out["outflow"].to_numpy()
    out["origin_outflow_roll_3"] = with_out["outflow_roll_3"].to_numpy()
    out["destination_inflow_lag_1"] = with_in["inflow"].to_numpy()
    out["destination_inflow_roll_3"] = with_in["inflow_roll_3"].to_numpy()

    latest = attrs.sort_values(["published_on", "load_id"]).drop_duplicates(DYAD, keep="last")
    latest = pd.DataFrame({
        "origin": latest["origin"], "destination": latest["destination"],
        "log_distance": np.log(latest["distance_km"].where(latest["distance_km"] > 0)),
        "contiguous": latest["contiguous"].astype(float), "common_language": latest["common_language"].astype(float),
        "colonial_tie": latest["colonial_tie"].astype(float),
        "log_diaspora": np.log1p(latest["diaspora"].where(latest["diaspora"] >= 0)),
    })
    attr_cols = out[DYAD].merge(latest, on=DYAD, how="left")
    for column in latest.columns[2:]:
        out[column] = attr_cols[column].to_numpy()
    out["calendar_month"] = panel["month"].dt.month.astype(int)
    for h in range(1, horizon + 1):
        out[f"target_{h}"] = by_dyad.shift(-h)
    if start is not None:
        out = out[out["month"] >= pd.Timestamp(start)]
    return out.reset_index(drop=True)


def build(con: duckdb.DuckDBPyConnection, cutoff: date, as_of: date, horizon: int = 6,
          start: date | None = None) -> pd.DataFrame:
    """Raw tables -> feature frame, all in pandas; same rows and order as `dyad_features(as_of, cutoff, ...)`."""
    raw = load_raw(con)
    panel = dense_panel(raw, cutoff, as_of)
    return dyad_features(panel, visible(raw["attributes"], as_of), horizon, start)


def sql_frame(con: duckdb.DuckDBPyConnection, cutoff: date, as_of: date, horizon: int = 6,
              start: date | None = None) -> pd.DataFrame:
    """The SQL macro's output in the same shape (targets unpacked), for comparisons."""
    table = con.sql("SELECT * FROM dyad_features(?, ?, ?, ?)",
                    params=[as_of, cutoff, horizon, start or date(1, 1, 1)]).to_arrow_table()
    return frame_from_arrow(table, horizon)


def frame_from_arrow(table: pa.Table, horizon: int) -> pd.DataFrame:
    """The macro's Arrow result as a frame with `target_1 .. target_H` instead of the `targets` list."""
    flat = pc.list_flatten(table.column("targets").combine_chunks())  # lists of exactly `horizon` values
    targets = flat.to_numpy(zero_copy_only=False).astype(float).reshape(-1, horizon)
    frame = table.drop_columns(["targets"]).to_pandas()
    for h in range(horizon):
        frame[f"target_{h + 1}"] = targets[:, h]
    frame["month"] = pd.to_datetime(frame["month"])
    return frame


def frame_from_grid(grid: HistoryGrid) -> pd.DataFrame:
    """dyadcast.grid's columns as a frame with the keys, in the macro's row order."""
    dyad_rows = np.repeat(np.arange(grid.n_dyads), grid.n_anchors)
    months = np.tile(np.arange(grid.first_anchor, grid.first_anchor + grid.n_anchors), grid.n_dyads)
    frame = pd.DataFrame({
        "origin": grid.origin_names.take(dyad_rows).to_pandas(),
        "destination": grid.destination_names.take(dyad_rows).to_pandas(),
        "month": month_starts(months),
        **grid.columns, "calendar_month": months % 12 + 1,
    })
    for h, values in enumerate(grid.targets, start=1):
        frame[f"target_{h}"] = values
    return frame


def compare(got: pd.DataFrame, expected: pd.DataFrame, rtol: float = 1e-9) -> dict[str, object]:
    """Cell-by-cell comparison on the shared keys: rows compared, cells that differ, worst difference."""
    keys = got[KEYS].astype(str).agg("|".join, axis=1)
    other = expected[KEYS].astype(str).agg("|".join, axis=1)
    left = got.set_axis(keys).sort_index()
    right = expected.set_axis(other).sort_index()
    shared = left.index.intersection(right.index)
    columns = [c for c in left.columns if c in right.columns and c not in KEYS]
    a = left.loc[shared, columns].to_numpy(dtype=float)
    b = right.loc[shared, columns].to_numpy(dtype=float)
    both_nan = np.isnan(a) & np.isnan(b)
    close = np.isclose(a, b, rtol=rtol, atol=1e-9) | both_nan
    worst = np.nanmax(np.abs(np.where(both_nan, 0.0, a - b))) if a.size else 0.0
    bad_columns = sorted({columns[j] for j in np.nonzero(~close)[1]})
    return {"rows": int(len(shared)), "rows_only_left": int(len(left) - len(shared)),
            "rows_only_right": int(len(right) - len(shared)), "columns": len(columns),
            "cells_differing": int((~close).sum()), "max_abs_diff": float(worst) if np.isfinite(worst) else None,
            "columns_differing": bad_columns}
