"""A tiny generated panel loaded into an in-memory warehouse through the ingest's reader and loader.

Great Expectations is skipped (its start costs 10-20 s); the reader, the typed cast and the load are the
ingest's own functions, so the files still have to meet the drop contract's column types.
"""

from __future__ import annotations

from datetime import date
from pathlib import Path

import duckdb
import global_panel as gp

from dyadcast.ingest.kinds import date_in_name, kind_of
from dyadcast.ingest.load import LoadRecord, commit_load, typed_table
from dyadcast.ingest.read import read_drop, scan_bytes
from dyadcast.warehouse import apply_sql


def load_files(con: duckdb.DuckDBPyConnection, files: list[Path]) -> None:
    for path in files:
        kind = kind_of(path)
        facts = scan_bytes(path)
        drop = read_drop(path, facts, kind)
        typed = typed_table(drop, kind, date_in_name(path) or date(2000, 1, 1))
        commit_load(con, typed, kind, LoadRecord(path.name, kind.name, facts.sha256, "parquet", facts.size,
                                                 "bench test", None))


def tiny_warehouse(directory: Path, spec: gp.PanelSpec) -> tuple[duckdb.DuckDBPyConnection, gp.Panel]:
    panel = gp.simulate(spec)
    history = gp.write_history(panel, directory / "history")
    month = gp.write_month(panel, directory / "month")
    con = duckdb.connect(":memory:")
    apply_sql(con)
    load_files(con, sorted(history.values()))
    load_files(con, sorted(month.values()))
    return con, panel
