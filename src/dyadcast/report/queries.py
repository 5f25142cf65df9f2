"""What the report reads from the warehouse. The logic lives in the analyst views of `sql/6*`
(and the scoring views of `sql/50_*`); here are only filtered reads of them.

A view that does not exist yet (a fresh workspace, or a layer not installed) reads as an empty frame,
so the report can say "nothing yet" instead of failing.
"""

from __future__ import annotations

from collections.abc import Sequence
from datetime import date
from typing import Any

import duckdb
import pandas as pd

from dyadcast.months import add_months

SURPRISE_COLUMNS = ["cutoff", "horizon", "origin", "destination", "target_month", "actual", "q050", "q500",
                    "q950", "beyond_90"]


def relation_exists(con: duckdb.DuckDBPyConnection, name: str) -> bool:
    sql = "SELECT count(*) FROM information_schema.tables WHERE table_name = ?"
    return bool(con.execute(sql, [name]).fetchone()[0])


def read(
    con: duckdb.DuckDBPyConnection,
    relation: str,
    where: dict[str, Any] | None = None,
    order_by: Sequence[str] = (),
    limit: int | None = None,
    extra: str = "",
    extra_params: Sequence[Any] = (),
) -> pd.DataFrame:
    """SELECT * with equality filters (values bound as parameters); empty frame if the relation is missing."""
    if not relation_exists(con, relation):
        return pd.DataFrame()
    where = where or {}
    clauses = [f'"{column}" = ?' for column in where]
    if extra:
        clauses.append(extra)
    sql = f'SELECT * FROM "{relation}"'
    if clauses:
        sql += " WHERE " + " AND ".join(clauses)
    if order_by:
        sql += " ORDER BY " + ", ".join(order_by)
    if limit is not None:
        sql += f" LIMIT {int(limit)}"
    return con.execute(sql, [*where.values(), *extra_params]).fetchdf()


def newest_cutoff(con: duckdb.DuckDBPyConnection, model: str | None = None) -> date | None:
    """The newest cutoff with a run of `model`, else of any model; None before the first run."""
    if model:
        value = con.execute("SELECT max(cutoff) FROM snapshot_runs WHERE model = ?", [model]).fetchone()[0]
        if value is not None:
            return value
    return con.execute("SELECT max(cutoff) FROM snapshot_runs").fetchone()[0]


def models_at(con: duckdb.DuckDBPyConnection, cutoff: date) -> list[str]:
    rows = con.execute("SELECT DISTINCT model FROM snapshot_runs WHERE cutoff = ? ORDER BY model", [cutoff])
    return [r[0] for r in rows.fetchall()]


def forecast_totals(con: duckdb.DuckDBPyConnection, cutoff: date, model: str) -> pd.DataFrame:
    """Totals of the newest run at the cutoff; a monthly run is preferred over a backtest of the same month."""
    frame = read(con, "forecasts_all", {"cutoff": cutoff, "model": model, "is_latest_run": True},
                 extra="level <> 'dyad'")
    if frame.empty:
        return frame
    kinds = set(frame["run_kind"])
    kind = "monthly" if "monthly" in kinds else sorted(kinds)[0]
    return frame[frame["run_kind"] == kind].reset_index(drop=True)


def actual_totals(con: duckdb.DuckDBPyConnection, cutoff: date, months_back: int, months_ahead: int) -> pd.DataFrame:
    """Reported totals (latest revision) around the cutoff, for the fan charts."""
    start, end = add_months(cutoff, -months_back), add_months(cutoff, months_ahead)
    return read(con, "actuals_totals", {"vintage": "latest"}, extra="month BETWEEN ? AND ?", extra_params=[start, end])


def overview(con: duckdb.DuckDBPyConnection, level: str = "dyad") -> pd.DataFrame:
    """Per model × cutoff × horizon × vintage; the filter on level lets DuckDB read only those rows."""
    return read(con, "accuracy_overview", {"level": level}, order_by=["model", "cutoff", "horizon"])


def skill(con: duckdb.DuckDBPyConnection) -> pd.DataFrame:
    return read(con, "skill_vs_persistence")


def surprises(con: duckdb.DuckDBPyConnection, model: str, limit: int = 10) -> pd.DataFrame:
    """Dyads whose actual fell furthest outside the 90 % interval (latest vintage, counted runs)."""
    frame = read(
        con, "accuracy_log",
        {"model": model, "level": "dyad", "vintage": "latest", "is_reference_run": True, "is_current": True},
        order_by=["beyond_90 DESC", "target_month DESC", "origin", "destination"], limit=limit,
        extra="beyond_90 > 0",
    )
    return frame[SURPRISE_COLUMNS] if not frame.empty else frame


def exceedances(con: duckdb.DuckDBPyConnection, model: str, limit: int = 15) -> pd.DataFrame:
    """The early-warning list of the scoring step (h = 1, actual above q950) for one model."""
    frame = read(con, "exceedances", {"model": model})
    if frame.empty:
        return frame
    if "vintage" in frame.columns:
        frame = frame[frame["vintage"] == "latest"]
    # a target forecast by a monthly run and a backtest appears once, as the monthly run saw it
    frame = frame.assign(excess=frame["actual"] - frame["q950"], monthly=frame["run_kind"].eq("monthly"))
    frame = frame.sort_values(["monthly", "run_id"], ascending=False).drop_duplicates(
        ["target_month", "origin", "destination"])
    return frame.sort_values(["target_month", "excess"], ascending=[False, False]).head(limit).reset_index(drop=True)


def freshness(con: duckdb.DuckDBPyConnection) -> pd.DataFrame:
    return read(con, "data_freshness")


def quarantined(con: duckdb.DuckDBPyConnection, limit: int = 20) -> pd.DataFrame:
    return read(con, "quarantined_files", order_by=["rejected_at DESC", "file_name"], limit=limit)
