"""In-memory warehouses for the feature tests, and helpers that insert hand-made raw rows."""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

import duckdb
import pandas as pd

from dyadcast.warehouse import apply_sql

COLUMNS = {
    "raw_flows": "load_id, published_on, origin, destination, month, arrivals",
    "raw_origin_indicators": "load_id, published_on, country, month, indicator, value",
    "raw_destination_indicators": "load_id, published_on, country, month, indicator, value",
    "raw_dyad_attributes": (
        "load_id, published_on, origin, destination, distance_km, contiguous, common_language, colonial_tie, diaspora"
    ),
    "raw_signals": "load_id, published_on, country, date, signal, intensity",
}


def new_warehouse() -> duckdb.DuckDBPyConnection:
    con = duckdb.connect()
    apply_sql(con)
    return con


def insert(con: duckdb.DuckDBPyConnection, table: str, rows: Sequence[Sequence[Any]]) -> None:
    """Rows in the column order of COLUMNS[table]; dates may be 'YYYY-MM-DD' strings."""
    if not rows:
        return
    marks = ", ".join("?" for _ in COLUMNS[table].split(","))
    con.executemany(f"INSERT INTO {table} ({COLUMNS[table]}) VALUES ({marks})", [list(r) for r in rows])


def insert_frame(con: duckdb.DuckDBPyConnection, table: str, frame: pd.DataFrame) -> None:
    """Bulk insert a frame whose columns are COLUMNS[table]."""
    if frame.empty:
        return
    con.register("incoming_rows", frame)
    try:
        con.execute(f"INSERT INTO {table} ({COLUMNS[table]}) SELECT {COLUMNS[table]} FROM incoming_rows")
    finally:
        con.unregister("incoming_rows")


def random_drops(seed: int, n_months: int = 18, first: str = "2022-01-01") -> dict[str, pd.DataFrame]:
    """Invented raw rows of every kind: monthly loads with revisions, unreported cells, lagged indicators.

    Each month's flows are published 3-40 days after the month ends; about one in six (destination, month)
    cells is never reported; about a third of earlier cells are revised by a later load; indicators are
    published one to three months late; attributes and daily signals arrive with the monthly loads.
    """
    import numpy as np

    rng = np.random.default_rng(seed)
    origins, destinations = ["QAA", "QAB", "QAC"], ["XAA", "XAB", "XAC"]
    months = pd.date_range(first, periods=n_months, freq="MS")
    flows, origin_ind, dest_ind, attrs, sig = [], [], [], [], []
    load = 0
    for i, month in enumerate(months):
        load += 1
        published = (month + pd.offsets.MonthEnd(0) + pd.Timedelta(days=int(rng.integers(3, 41)))).date()
        for d in destinations:
            if rng.random() < 1 / 6:
                continue  # this destination does not report this month
            for o in origins:
                if rng.random() < 0.7:  # unlisted origins are implied zeros
                    flows.append((load, published, o, d, month.date(), int(rng.poisson(3) * (rng.random() < 0.6))))
        if i > 0 and rng.random() < 0.5:  # a revision load restating one earlier cell
            load += 1
            old = months[int(rng.integers(0, i))].date()
            d = destinations[int(rng.integers(0, 3))]
            for o in origins[: int(rng.integers(1, 4))]:
                flows.append((load, published, o, d, old, int(rng.poisson(4))))
        lagged = months[max(i - int(rng.integers(1, 4)), 0)].date()
        for o in origins[: int(rng.integers(1, 4))]:
            origin_ind.append((load, published, o, lagged, "conflict", float(rng.normal())))
        for d in destinations[:2]:
            dest_ind.append((load, published, d, lagged, "recognition", float(rng.random())))
        if rng.random() < 0.3:
            o, d = origins[int(rng.integers(0, 3))], destinations[int(rng.integers(0, 3))]
            attrs.append((load, published, o, d, float(rng.uniform(100, 3000)), int(rng.integers(0, 2)), 0, 0,
                          float(rng.integers(0, 500))))
        for day in pd.date_range(month, month + pd.offsets.MonthEnd(0), freq="D"):
            for o in origins[:2]:
                sig.append((load, published, o, day.date(), "search", float(rng.uniform(0, 100))))
    columns = {k: [c.strip() for c in v.split(",")] for k, v in COLUMNS.items()}
    return {
        "raw_flows": pd.DataFrame(flows, columns=columns["raw_flows"]),
        "raw_origin_indicators": pd.DataFrame(origin_ind, columns=columns["raw_origin_indicators"]),
        "raw_destination_indicators": pd.DataFrame(dest_ind, columns=columns["raw_destination_indicators"]),
        "raw_dyad_attributes": pd.DataFrame(attrs, columns=columns["raw_dyad_attributes"]),
        "raw_signals": pd.DataFrame(sig, columns=columns["raw_signals"]),
    }


def load_drops(con: duckdb.DuckDBPyConnection, drops: dict[str, pd.DataFrame], as_of=None) -> None:
    """Empty the raw tables and insert the drops (only rows published on or before `as_of` if given)."""
    for table, frame in drops.items():
        con.execute(f"DELETE FROM {table}")
        if as_of is not None:
            frame = frame[frame["published_on"] <= as_of]
        insert_frame(con, table, frame)
