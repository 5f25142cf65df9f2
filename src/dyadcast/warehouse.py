"""The DuckDB warehouse: connect, and apply the SQL files of `sql/` in their layer order."""

from __future__ import annotations

import os
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path

import duckdb


def sql_dir() -> Path:
    """The repository's `sql/` folder (override with DYADCAST_SQL_DIR, e.g. in a container)."""
    override = os.environ.get("DYADCAST_SQL_DIR")
    if override:
        return Path(override)
    return Path(__file__).resolve().parents[2] / "sql"


def sql_files(directory: Path | None = None) -> list[Path]:
    """Top-level *.sql files sorted by name: the numeric prefix is the layer order (schema, raw, clean, ...)."""
    return sorted((directory or sql_dir()).glob("*.sql"))


def read_sql(name: str) -> str:
    """Text of one SQL file by name, from `sql/` or a subfolder such as `sql/queries/`."""
    path = sql_dir() / name
    if not path.is_file():
        raise FileNotFoundError(f"SQL file {path} is missing; the repository's sql/ folder is incomplete")
    return path.read_text(encoding="utf-8")


def apply_sql(con: duckdb.DuckDBPyConnection, directory: Path | None = None) -> list[str]:
    """Create tables (idempotent) and (re)create every view and macro; returns the files applied."""
    applied = []
    for path in sql_files(directory):
        try:
            con.execute(path.read_text(encoding="utf-8"))
        except duckdb.Error as exc:
            raise RuntimeError(f"{path.name}: {exc}") from exc
        applied.append(path.name)
    return applied


def connect(path: Path | str, read_only: bool = False) -> duckdb.DuckDBPyConnection:
    return duckdb.connect(str(path), read_only=read_only)


@contextmanager
def open_warehouse(path: Path | str, read_only: bool = False, apply: bool = True) -> Iterator[duckdb.DuckDBPyConnection]:
    """A connection with the schema and views in place; closed on exit."""
    con = connect(path, read_only=read_only)
    try:
        if apply and not read_only:
            apply_sql(con)
        yield con
    finally:
        con.close()
