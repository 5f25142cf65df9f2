"""The dyad-level history features on a dense dyad x month grid held in memory: the feature build's fast path.

Why: once DuckDB has done the set work (the dyad universe, the winning vintage of every cell, the rows it
lists, the latest attributes: sql/30_05 .. 30_07), the panel is a dense matrix with one row per dyad and one
column per month, so lags, rolling windows, leads, running maxima and country totals are array slices and
reductions. At 40,000 dyads x 7 years that takes a fraction of a second, where the same windows in SQL need a
window operator and a sort over millions of rows (bench/README.md). The SQL macro `dyad_features`
(sql/40_01_dyad_features.sql) defines the same columns for analysts; tests pin both to a pandas reference.

Grid layout: column j holds month number `base + j` (month number = year * 12 + month - 1), from 11 months
before the first anchor month (the 12-month windows of the first anchor) to `horizon` months after the
cutoff (the last targets, always missing). Cells outside the panel months stay NaN, as rows the SQL window
does not have.
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import date

import duckdb
import numpy as np
import pyarrow as pa
import pyarrow.compute as pc

from dyadcast.months import month_from_index, month_index, month_range

WINDOW = 12  # longest look-back of a feature: lag_12, roll_mean_12, origin_share_12
MONTHS_SINCE_POSITIVE_CAP = 120  # also set in sql/40_01_dyad_features.sql
NO_MONTH = -(10**6)  # "never positive": further back than any cap


@dataclass
class HistoryGrid:
    """Per-row history columns (rows: dyads in (origin, destination) order, each over the anchor months)."""

    origins: list[str]  # origin code -> country, in sorted order
    destinations: list[str]  # destination code -> country, in order of first appearance
    origin_code: np.ndarray  # per dyad
    destination_code: np.ndarray  # per dyad
    origin_names: pa.Array  # per dyad, the country codes as text
    destination_names: pa.Array
    first_anchor: int  # month number of the first anchor month
    n_anchors: int
    columns: dict[str, np.ndarray]  # name -> one value per row
    targets: list[np.ndarray]  # target_1 .. target_H, one value per row each
    outflow: np.ndarray  # origin code x anchor month: monthly outflow (NaN when nothing is reported)

    @property
    def n_dyads(self) -> int:
        return len(self.origin_code)


def _first_panel_month(con: duckdb.DuckDBPyConnection, as_of: date, cutoff: date) -> int | None:
    first = con.execute("SELECT min(month) FROM panel_months(?, ?)", [as_of, cutoff]).fetchall()[0][0]
    return None if first is None else month_index(first)


def _codes(names: pa.Array) -> tuple[np.ndarray, list[str]]:
    encoded = pc.dictionary_encode(names)
    return encoded.indices.to_numpy(zero_copy_only=False).astype(np.int64), encoded.dictionary.to_pylist()


def _sum_by(values: np.ndarray, group: np.ndarray, n_groups: int) -> tuple[np.ndarray, np.ndarray]:
    """Row sums of `values` (NaN skipped) per group, and how many non-NaN values each sum has."""
    order = np.argsort(group, kind="stable")
    sorted_group = group[order]
    starts = np.flatnonzero(np.r_[True, sorted_group[1:] != sorted_group[:-1]])
    present = ~np.isnan(values[order])
    sums = np.add.reduceat(np.where(present, values[order], 0.0), starts, axis=0)
    counts = np.add.reduceat(present, starts, axis=0, dtype=np.int64)
    out_sums = np.zeros((n_groups, values.shape[1]))
    out_counts = np.zeros((n_groups, values.shape[1]), dtype=np.int64)
    out_sums[sorted_group[starts]] = sums
    out_counts[sorted_group[starts]] = counts
    return np.where(out_counts > 0, out_sums, np.nan), out_counts


def _trailing(matrix: np.ndarray, first: int, n: int, width: int) -> tuple[np.ndarray, np.ndarray]:
    """Sum (NaN skipped) and count of non-NaN values over the `width` columns ending at each of n columns.

    From running sums: exact, because arrivals are whole numbers (BIGINT in raw_flows), so every partial sum
    of them is an integer far below 2**53.
    """
    present = ~np.isnan(matrix)
    zero = np.zeros((matrix.shape[0], 1))
    running = np.concatenate([zero, np.cumsum(np.where(present, matrix, 0.0), axis=1)], axis=1)
    counted = np.concatenate([zero.astype(np.int64), np.cumsum(present, axis=1, dtype=np.int64)], axis=1)
    ends, begins = slice(first + 1, first + 1 + n), slice(first + 1 - width, first + 1 - width + n)
    return running[:, ends] - running[:, begins], counted[:, ends] - counted[:, begins]


def _mean(total: np.ndarray, count: np.ndarray) -> np.ndarray:
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(count > 0, total / np.maximum(count, 1), np.nan)


def history_grid(
    con: duckdb.DuckDBPyConnection, as_of: date, cutoff: date, horizon: int, start: date | None
) -> HistoryGrid | None:
    """The history columns of `dyad_features(as_of, cutoff, horizon, start)`; None when no flows are visible."""
    first = _first_panel_month(con, as_of, cutoff)
    hi = month_index(cutoff)
    if first is None or first > hi:
        return None
    anchor0 = max(first, month_index(start) if start is not None else first)
    lo = max(first, anchor0 - (WINDOW - 1))  # the first panel month any window of an anchor reaches
    base = anchor0 - (WINDOW - 1)
    width = hi + horizon - base + 1
    n_anchors = hi - anchor0 + 1
    a0 = anchor0 - base  # grid column of the first anchor month

    dyads = con.sql("SELECT * FROM grid_dyads(?)", params=[as_of]).to_arrow_table()
    origin_code, origins = _codes(dyads.column("origin").combine_chunks())
    destination_code, destinations = _codes(dyads.column("destination").combine_chunks())
    n = dyads.num_rows
    cells = con.sql("SELECT * FROM grid_cells(?, ?, ?)", params=[as_of, month_from_index(lo), cutoff]).to_arrow_table()
    cell_destination = pc.index_in(cells.column("destination"), value_set=pa.array(destinations, pa.string()))
    known = cell_destination.is_valid().to_numpy(zero_copy_only=False)
    reported = np.zeros((len(destinations), width), dtype=bool)
    reported[cell_destination.to_numpy(zero_copy_only=False)[known].astype(np.int64),
             cells.column("month_number").to_numpy()[known] - base] = True
    grid = np.where(reported[destination_code], 0.0, np.nan)  # reported cells are zero unless listed

    # months_since_positive looks back at most the cap, so older rows cannot matter
    read_from = max(first, anchor0 - MONTHS_SINCE_POSITIVE_CAP)
    listed = con.sql("SELECT * FROM grid_listed(?, ?, ?)", params=[as_of, month_from_index(read_from), cutoff]).fetchnumpy()
    dyad = np.asarray(listed["dyad_index"], dtype=np.int64) - 1
    month = np.asarray(listed["month_number"], dtype=np.int64)
    arrivals = np.asarray(listed["arrivals"], dtype=float)
    inside = month >= lo
    grid[dyad[inside], month[inside] - base] = arrivals[inside]
    last_before = np.full(n, NO_MONTH, dtype=np.int64)
    earlier = ~inside & (arrivals > 0)
    np.maximum.at(last_before, dyad[earlier], month[earlier])

    anchors = slice(a0, a0 + n_anchors)
    columns: dict[str, np.ndarray] = {}
    for k in range(1, WINDOW + 1):
        columns[f"lag_{k}"] = grid[:, a0 - k + 1:a0 - k + 1 + n_anchors]
    for w in (3, 6):
        columns[f"roll_mean_{w}"] = _mean(*_trailing(grid, a0, n_anchors, w))
    own_12, reported_12 = _trailing(grid, a0, n_anchors, WINDOW)
    columns["roll_mean_12"] = _mean(own_12, reported_12)

    positive_month = np.where(grid[:, :a0 + n_anchors] > 0, np.arange(a0 + n_anchors) + base, NO_MONTH)
    last_positive = np.maximum(np.maximum.accumulate(positive_month, axis=1)[:, anchors], last_before[:, None])
    since = np.arange(anchor0, hi + 1)[None, :] - last_positive
    columns["months_since_positive"] = np.minimum(since, MONTHS_SINCE_POSITIVE_CAP).astype(float)

    outflow, _ = _sum_by(grid, origin_code, len(origins))
    inflow, _ = _sum_by(grid, destination_code, len(destinations))
    dyad_outflow = np.where(np.isnan(grid), np.nan, outflow[origin_code])  # months the dyad reports
    share_base, _ = _trailing(dyad_outflow, a0, n_anchors, WINDOW)
    with np.errstate(invalid="ignore", divide="ignore"):
        columns["origin_share_12"] = np.where((reported_12 > 0) & (share_base != 0), own_12 / share_base, np.nan)
    columns["origin_outflow_lag_1"] = outflow[origin_code][:, anchors]
    columns["origin_outflow_roll_3"] = _mean(*_trailing(outflow, a0, n_anchors, 3))[origin_code]
    columns["destination_inflow_lag_1"] = inflow[destination_code][:, anchors]
    columns["destination_inflow_roll_3"] = _mean(*_trailing(inflow, a0, n_anchors, 3))[destination_code]
    targets = [grid[:, a0 + h:a0 + h + n_anchors].ravel() for h in range(1, horizon + 1)]

    per_row = {name: np.ascontiguousarray(values).ravel() for name, values in columns.items()}
    for name in ("log_distance", "contiguous", "common_language", "colonial_tie", "log_diaspora"):
        values = dyads.column(name).to_numpy(zero_copy_only=False).astype(float)
        per_row[name] = np.repeat(values, n_anchors)
    return HistoryGrid(
        origins=origins, destinations=destinations, origin_code=origin_code, destination_code=destination_code,
        origin_names=dyads.column("origin").combine_chunks(),
        destination_names=dyads.column("destination").combine_chunks(),
        first_anchor=anchor0, n_anchors=n_anchors, columns=per_row, targets=targets,
        outflow=outflow[:, anchors],
    )


def anchor_dates(grid: HistoryGrid) -> list[date]:
    return month_range(month_from_index(grid.first_anchor), month_from_index(grid.first_anchor + grid.n_anchors - 1))
