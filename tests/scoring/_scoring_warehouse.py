"""A tiny invented warehouse for scoring tests: raw flows by vintage, runs and their forecast rows.

Country codes are user-assigned ISO 3166-1 alpha-3 codes (QMA.., XAA..). Everything is made up.
"""

from __future__ import annotations

from datetime import date, datetime
from itertools import product

import duckdb
import pandas as pd

from dyadcast.months import add_months, parse_month
from dyadcast.warehouse import apply_sql

QCOLS = ["q050", "q250", "q500", "q750", "q950"]


def new_warehouse(path: str = ":memory:") -> duckdb.DuckDBPyConnection:
    con = duckdb.connect(path)
    apply_sql(con)
    return con


def add_flows(con: duckdb.DuckDBPyConnection, load_id: int, published_on: str,
              rows: list[tuple[str, str, str, int]]) -> None:
    """One flows vintage: (origin, destination, 'YYYY-MM', arrivals); complete for each (destination, month)."""
    frame = pd.DataFrame(rows, columns=["origin", "destination", "month", "arrivals"])
    frame["month"] = [parse_month(m) for m in frame["month"]]
    frame.insert(0, "published_on", date.fromisoformat(published_on))
    frame.insert(0, "load_id", load_id)
    con.register("_flows", frame)
    con.execute("INSERT INTO raw_flows BY NAME SELECT * FROM _flows")
    con.unregister("_flows")


def forecast_frame(dyads: list[tuple[str, str]], cutoff: str, horizon: int, mean: float = 10.0,
                   spread: float = 0.5, totals: bool = True) -> pd.DataFrame:
    """Forecast rows for every dyad and h = 1..horizon, plus origin/destination/world totals (plain sums)."""
    c = parse_month(cutoff)
    rows = []
    for (o, d), h in product(dyads, range(1, horizon + 1)):
        m = mean * h
        rows.append({"level": "dyad", "origin": o, "destination": d, "horizon": h,
                     "target_month": add_months(c, h), "mean": m,
                     "q050": m * (1 - 2 * spread), "q250": m * (1 - spread / 2), "q500": m,
                     "q750": m * (1 + spread / 2), "q950": m * (1 + 2 * spread), "p_positive": 0.9})
    frame = pd.DataFrame(rows)
    if not totals:
        return frame
    parts = [frame]
    for level, keys in (("origin_total", ["origin"]), ("destination_total", ["destination"]), ("world_total", [])):
        g = frame.groupby([*keys, "horizon", "target_month"], as_index=False)[["mean", *QCOLS]].sum()
        g["p_positive"] = 0.99
        g["level"] = level
        for side in ("origin", "destination"):
            if side not in keys:
                g[side] = "*"
        parts.append(g)
    return pd.concat(parts, ignore_index=True)


def add_run(con: duckdb.DuckDBPyConnection, run_id: str, cutoff: str, model: str, as_of: str,
            forecast: pd.DataFrame, run_kind: str = "monthly", created_at: datetime | None = None) -> None:
    c = parse_month(cutoff)
    con.execute(
        "INSERT INTO snapshot_runs VALUES (?, ?, ?, ?, ?, ?, ?, ?)",
        [run_id, c, model, run_kind, date.fromisoformat(as_of), created_at or datetime(2030, 1, 1),
         f"snapshots/{run_id}", "{}"],
    )
    rows = forecast.copy()
    rows.insert(0, "run_kind", run_kind)
    rows.insert(0, "model", model)
    rows.insert(0, "cutoff", c)
    rows.insert(0, "run_id", run_id)
    con.register("_fc", rows)
    con.execute("INSERT INTO forecast_rows BY NAME SELECT * FROM _fc")
    con.unregister("_fc")


def count(con: duckdb.DuckDBPyConnection, table: str, where: str = "TRUE") -> int:
    return con.execute(f"SELECT count(*) FROM {table} WHERE {where}").fetchone()[0]
