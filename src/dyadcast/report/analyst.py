"""Read-only SQL for analysts: run a query on the warehouse without any chance of changing it.

Two locks: the connection is opened read-only (DuckDB refuses writes to the file), and statements other
than SELECT / EXPLAIN / PRAGMA are refused before they run, because a read-only connection still lets
COPY … TO write files and ATTACH open other databases.
"""

from __future__ import annotations

from pathlib import Path

import duckdb
import pandas as pd

ALLOWED = {"SELECT", "EXPLAIN", "PRAGMA"}


class QueryRefused(ValueError):
    """The query would write, or could not run; the message says why and what to do."""


def _type_name(statement: duckdb.Statement) -> str:
    return str(statement.type).rsplit(".", 1)[-1]


def check_read_only(con: duckdb.DuckDBPyConnection, sql: str) -> None:
    """Refuse anything but reading, naming the statement, before DuckDB executes it."""
    try:
        statements = con.extract_statements(sql)
    except duckdb.Error as exc:
        raise QueryRefused(f"the query does not parse: {exc}") from exc
    if not statements:
        raise QueryRefused("the query is empty; pass a SELECT statement")
    for number, statement in enumerate(statements, start=1):
        kind = _type_name(statement)
        if kind not in ALLOWED:
            raise QueryRefused(
                f"statement {number} is {kind}: `dyadcast sql` only reads (SELECT, EXPLAIN, PRAGMA). "
                "The warehouse is the record of every load, forecast and score; change it only through "
                "dyadcast commands."
            )


def open_read_only(path: Path) -> duckdb.DuckDBPyConnection:
    if not Path(path).is_file():
        raise QueryRefused(f"no warehouse at {path}; run `dyadcast ingest` or `dyadcast run` first")
    try:
        return duckdb.connect(str(path), read_only=True)
    except duckdb.IOException as exc:
        if "lock" in str(exc).lower():
            raise QueryRefused(
                f"the warehouse {path} is in use by a running dyadcast command (DuckDB allows one writer and no "
                "readers meanwhile); retry when the run has finished"
            ) from exc
        raise QueryRefused(f"cannot open the warehouse {path}: {exc}") from exc


def run_query(path: Path, sql: str) -> pd.DataFrame:
    """The result of the last statement, from a read-only connection."""
    con = open_read_only(path)
    try:
        check_read_only(con, sql)
        try:
            return con.execute(sql).fetchdf()
        except duckdb.Error as exc:
            if "read-only" in str(exc):
                raise QueryRefused(f"the query tried to write: {exc}. `dyadcast sql` only reads.") from exc
            raise QueryRefused(f"the query failed: {exc}") from exc
    finally:
        con.close()


def format_table(frame: pd.DataFrame) -> str:
    """An aligned text table with a row count; NULL shown as NULL."""
    if frame.columns.empty:
        return "(no columns)"
    text = frame.to_string(index=False, na_rep="NULL", max_colwidth=80)
    count = len(frame)
    return f"{text}\n({count} row{'s' if count != 1 else ''})"


def format_csv(frame: pd.DataFrame) -> str:
    return frame.to_csv(index=False, lineterminator="\n")
