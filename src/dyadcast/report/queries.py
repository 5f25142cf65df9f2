"""What the report reads from the warehouse. The logic lives in the analyst views of `sql/6*`
(and the scoring views of `sql/50_*`); here are only filtered reads of them. Accuracy comes from the
summaries of the accuracy log (sql/06_schema_accuracy_summaries.sql), never from the log itself, so a
report costs the same with 12 stored runs as with 120 (`dyadcast.report.summaries`).

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
from dyadcast.report.summaries import SURPRISE_DEPTH

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
    """Dyads whose actual fell furthest outside the 90 % interval (latest vintage, counted runs).

    The rows of accuracy_log with is_reference_run and is_current, read from the few rows per run, target
    month and vintage that accuracy_surprise_candidates keeps (enough for any top `SURPRISE_DEPTH`). Ties
    in the distance go to the newer target month, then by origin, destination and the newer cutoff.
    """
    if limit > SURPRISE_DEPTH:
        raise ValueError(f"surprises: limit {limit} is above the {SURPRISE_DEPTH} rows per run, target month and "
                         "vintage that accuracy_surprise_rows keeps (sql/50_11); raise both together")
    if not relation_exists(con, "accuracy_surprise_candidates"):
        return pd.DataFrame()
    sql = (
        "SELECT s.* FROM accuracy_surprise_candidates AS s "
        "SEMI JOIN accuracy_summary_runs AS r ON r.run_id = s.run_id AND r.is_reference_run "
        "WHERE s.model = ? AND s.vintage = 'latest' "
        "ORDER BY s.beyond_90 DESC, s.target_month DESC, s.origin, s.destination, s.cutoff DESC LIMIT ?"
    )
    frame = con.execute(sql, [model, limit]).fetchdf()
    return frame[SURPRISE_COLUMNS] if not frame.empty else frame


def exceedance_months(con: duckdb.DuckDBPyConnection, model: str, limit: int) -> date | None:
    """The oldest target month the early-warning list can reach: newest months first, until they hold at
    least `limit` exceedances. A month holds at least as many distinct dyads as its largest run counted, so
    the rows of the months before this one cannot make the list. None: every month is needed (or none)."""
    sql = (
        "WITH summary_groups AS MATERIALIZED (SELECT * FROM accuracy_groups) "
        "SELECT g.target_month, max(g.n_exceeded) AS n FROM summary_groups AS g "
        "SEMI JOIN accuracy_summary_runs_of('summary_groups') AS r ON r.run_id = g.run_id AND r.is_latest_run "
        "WHERE g.model = ? AND g.vintage = 'latest' AND g.level = 'dyad' AND g.horizon = 1 AND g.n_exceeded > 0 "
        "GROUP BY g.target_month ORDER BY g.target_month DESC"
    )
    total = 0
    for month, n in con.execute(sql, [model]).fetchall():
        total += int(n)
        if total >= limit:
            return month
    return None


def exceedances(con: duckdb.DuckDBPyConnection, model: str, limit: int = 15) -> pd.DataFrame:
    """The early-warning list of the scoring step (h = 1, actual above q950, latest vintage) for one model,
    newest target months first: the rows of the view `exceedances`, read only for the newest target months
    the list can reach. A target forecast by a monthly run and a backtest appears once, as the monthly run
    saw it (else the newest run)."""
    if not relation_exists(con, "accuracy_exceedance_candidates"):
        return pd.DataFrame()
    oldest = exceedance_months(con, model, limit)
    sql = (
        "WITH summary_groups AS MATERIALIZED (SELECT * FROM accuracy_groups) "
        "SELECT e.model, e.run_kind, e.cutoff, e.run_id, e.target_month, e.vintage, e.origin, e.destination, "
        "e.actual, e.mean, e.q500, e.q950, e.actual - e.q950 AS excess, e.actual / nullif(e.q950, 0) AS excess_ratio "
        "FROM accuracy_exceedance_candidates AS e "
        "SEMI JOIN accuracy_summary_runs_of('summary_groups') AS r ON r.run_id = e.run_id AND r.is_latest_run "
        "WHERE e.model = ? AND e.vintage = 'latest' AND e.target_month >= ? "
        "QUALIFY row_number() OVER (PARTITION BY e.target_month, e.origin, e.destination "
        "ORDER BY (e.run_kind = 'monthly') DESC, e.run_id DESC) = 1 "
        "ORDER BY e.target_month DESC, excess DESC, e.origin, e.destination LIMIT ?"
    )
    return con.execute(sql, [model, oldest or date.min, limit]).fetchdf()


def freshness(con: duckdb.DuckDBPyConnection) -> pd.DataFrame:
    return read(con, "data_freshness")


def quarantined(con: duckdb.DuckDBPyConnection, limit: int = 20) -> pd.DataFrame:
    return read(con, "quarantined_files", order_by=["rejected_at DESC", "file_name"], limit=limit)
