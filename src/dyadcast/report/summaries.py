"""Bring the accuracy summaries (sql/06_schema_accuracy_summaries.sql) up to date with the accuracy log.

The report, the accuracy views (sql/51-54) and `accuracy_overview` read per-group sums instead of the log,
so their cost follows the newest scoring batches, not the length of the history. This module stores those
sums for the batches not summarised yet; the SQL that computes them lives in sql/50_01-50_11 and is the same
SQL the views run live for whatever is not stored yet, so a stale summary can make a read slower, never
different. The report build calls `refresh_summaries` first; anything else may call it after scoring.
"""

from __future__ import annotations

import re
import time
from collections.abc import Iterator
from contextlib import contextmanager
from dataclasses import dataclass
from datetime import UTC, datetime

import duckdb

# summary table -> the macro (sql/50_08-50_11) that computes its rows from current accuracy rows
TABLES: dict[str, str] = {
    "accuracy_group_stats": "accuracy_group_stats_of",
    "accuracy_pair_stats": "accuracy_pair_stats_of",
    "accuracy_exceedance_rows": "accuracy_exceedance_rows_of",
    "accuracy_surprise_rows": "accuracy_surprise_rows_of",
}
# temporary relations of one refresh, named so that they cannot collide with anything in the warehouse
CHANGES, ALL_GROUPS, GROUPS, GROUP_ROWS, SUPERSEDED, OLDER_ROWS, CURRENT = (
    "accuracy_refresh_changes", "accuracy_refresh_all_groups", "accuracy_refresh_groups", "accuracy_refresh_group_rows",
    "accuracy_refresh_superseded", "accuracy_refresh_older_rows", "accuracy_refresh_current",
)
# Target months recomputed per pass: a monthly scoring touches the new month and the revised one (one pass);
# a first refresh of a long log or a rebuilt log goes through it two months at a time, in bounded memory.
MONTHS_PER_PASS = 2
# DuckDB memory while refreshing. The rows a revision replaced may lie anywhere in a long log; read once, they
# need not stay cached, and without a cap DuckDB keeps every block it read (1.4 GB with 120 stored runs,
# measured). Capped at 0.6 GB the refresh took the same time at that scale (measured); 1 GiB leaves room.
REFRESH_MEMORY_LIMIT = 1 << 30
_UNITS = {"b": 1, "bytes": 1, "kb": 10**3, "mb": 10**6, "gb": 10**9, "tb": 10**12,
          "kib": 2**10, "mib": 2**20, "gib": 2**30, "tib": 2**40}
SURPRISE_DEPTH = 20  # rows kept per group by accuracy_surprise_rows_of (sql/50_11)


@dataclass(frozen=True)
class RefreshResult:
    state: str  # 'current' (nothing to do), 'refreshed', 'read-only' or 'no summaries' (old warehouse)
    new_batches: int = 0
    gone_batches: int = 0
    groups: int = 0
    seconds: float = 0.0

    def to_text(self) -> str:
        if self.state != "refreshed":
            return f"accuracy summaries: {self.state}"
        gone = f", {self.gone_batches} batch(es) no longer in the log" if self.gone_batches else ""
        return (f"accuracy summaries: {self.new_batches} new batch(es){gone}; {self.groups} run-target-vintage "
                f"group(s) recomputed [{self.seconds:.1f} s]")


def _exists(con: duckdb.DuckDBPyConnection, name: str) -> bool:
    sql = "SELECT count(*) FROM information_schema.tables WHERE table_name = ?"
    return bool(con.execute(sql, [name]).fetchone()[0])


def is_read_only(con: duckdb.DuckDBPyConnection) -> bool:
    row = con.execute("SELECT readonly FROM duckdb_databases() WHERE database_name = current_database()").fetchone()
    return bool(row and row[0])


def is_stale(con: duckdb.DuckDBPyConnection) -> bool:
    """Whether the stored summaries may differ from the log (reads table statistics only)."""
    return bool(con.execute("SELECT stale FROM accuracy_summary_status").fetchone()[0])


def _delete_groups(con: duckdb.DuckDBPyConnection) -> None:
    """Delete the stored rows of every group being recomputed."""
    for table in TABLES:
        con.execute(
            f"DELETE FROM {table} AS t WHERE EXISTS (SELECT 1 FROM {ALL_GROUPS} AS g WHERE g.run_id = t.run_id "
            "AND g.target_month = t.target_month AND g.vintage = t.vintage)"
        )


def _first_new_score(con: duckdb.DuckDBPyConnection) -> str:
    """scored_at of the oldest new batch, as SQL text: a literal lets DuckDB skip the older row groups."""
    sql = (f"SELECT CAST(coalesce(min(first_scored_at), TIMESTAMP 'infinity') AS VARCHAR) FROM {CHANGES} "
           "WHERE change = 'new'")
    text = str(con.execute(sql).fetchone()[0])
    return "TIMESTAMP '" + text.replace("'", "") + "'"


def _insert_groups(con: duckdb.DuckDBPyConnection, months: list[object], since: str) -> None:
    """Compute and insert the rows of the groups of some target months (one pass bounds the memory)."""
    con.execute(f"CREATE OR REPLACE TEMP TABLE {GROUPS} AS SELECT * FROM {ALL_GROUPS} "
                "WHERE list_contains(?, target_month)", [months])
    con.execute(f"CREATE OR REPLACE TEMP TABLE {GROUP_ROWS} AS SELECT * FROM accuracy_group_rows_of('{GROUPS}')")
    con.execute(f"CREATE OR REPLACE TEMP TABLE {SUPERSEDED} AS SELECT * FROM accuracy_superseded_of('{GROUP_ROWS}')")
    con.execute(f"CREATE OR REPLACE TEMP TABLE {OLDER_ROWS} AS "
                f"SELECT * FROM accuracy_older_rows_of('{GROUP_ROWS}', '{SUPERSEDED}', {since})")
    con.execute(f"CREATE OR REPLACE TEMP VIEW {CURRENT} AS "
                f"SELECT * FROM accuracy_current_rows_of('{GROUPS}', '{SUPERSEDED}', '{OLDER_ROWS}', {since})")
    for table, macro in TABLES.items():
        con.execute(f"INSERT INTO {table} BY NAME SELECT * FROM {macro}('{CURRENT}')")


def _record_batches(con: duckdb.DuckDBPyConnection) -> tuple[int, int]:
    con.execute(f"DELETE FROM accuracy_summary_batches WHERE batch_id IN "
                f"(SELECT batch_id FROM {CHANGES} WHERE change = 'gone')")
    con.execute(
        "INSERT INTO accuracy_summary_batches (batch_id, n_rows, first_scored_at, last_scored_at, summarised_at) "
        f"SELECT batch_id, n_rows, first_scored_at, last_scored_at, ? FROM {CHANGES} WHERE change = 'new'",
        [datetime.now(UTC).replace(tzinfo=None)],
    )
    counts = dict(con.execute(f"SELECT change, count(*) FROM {CHANGES} GROUP BY change").fetchall())
    return int(counts.get("new", 0)), int(counts.get("gone", 0))


def _bytes(setting: str) -> float | None:
    """DuckDB's memory_limit text ('18.8 GiB', '572.2 MiB') in bytes; None if it is not of that form."""
    match = re.fullmatch(r"\s*([0-9.]+)\s*([A-Za-z]+)\s*", setting)
    if not match or match.group(2).lower() not in _UNITS:
        return None
    return float(match.group(1)) * _UNITS[match.group(2).lower()]


@contextmanager
def _memory_cap(con: duckdb.DuckDBPyConnection, limit: int) -> Iterator[None]:
    """Lower DuckDB's memory limit to `limit` bytes for the block, then put the previous one back: the default
    by RESET, a value set by the caller by its text (DuckDB shows it rounded to 0.1 of its unit)."""
    setting = "SELECT current_setting('memory_limit')"
    previous = str(con.execute(setting).fetchone()[0])
    current = _bytes(previous)
    if current is not None and current <= limit:
        yield
        return
    con.execute("RESET memory_limit")
    was_default = str(con.execute(setting).fetchone()[0]) == previous
    con.execute(f"SET memory_limit = '{limit}B'")
    try:
        yield
    finally:
        con.execute("RESET memory_limit" if was_default else f"SET memory_limit = '{previous}'")


def _drop_temporaries(con: duckdb.DuckDBPyConnection) -> None:
    con.execute(f"DROP VIEW IF EXISTS {CURRENT}")
    for name in (OLDER_ROWS, SUPERSEDED, GROUP_ROWS, GROUPS, ALL_GROUPS, CHANGES):
        con.execute(f"DROP TABLE IF EXISTS {name}")


def _refresh(con: duckdb.DuckDBPyConnection) -> tuple[int, int, int]:
    """One transaction: find what changed, replace the summaries of those groups, record the batches."""
    con.execute("BEGIN TRANSACTION")
    try:
        # The order matters: the groups are read from the stored summaries before they are replaced.
        con.execute(f"CREATE OR REPLACE TEMP TABLE {CHANGES} AS SELECT * FROM accuracy_summary_batch_changes")
        con.execute(f"CREATE OR REPLACE TEMP TABLE {ALL_GROUPS} AS SELECT * FROM accuracy_recompute_groups_of('{CHANGES}')")
        groups = int(con.execute(f"SELECT count(*) FROM {ALL_GROUPS}").fetchone()[0])
        months = [r[0] for r in con.execute(f"SELECT DISTINCT target_month FROM {ALL_GROUPS} ORDER BY 1").fetchall()]
        since = _first_new_score(con)
        _delete_groups(con)
        for start in range(0, len(months), MONTHS_PER_PASS):
            _insert_groups(con, months[start:start + MONTHS_PER_PASS], since)
        new, gone = _record_batches(con)
        _drop_temporaries(con)
        con.execute("COMMIT")
    except BaseException:
        con.execute("ROLLBACK")
        raise
    return new, gone, groups


def refresh_summaries(con: duckdb.DuckDBPyConnection) -> RefreshResult:
    """Store the summaries of every batch of `accuracy_rows` not summarised yet, in one transaction.

    Costs one pass over the rows of the affected target months (and a scan of the batch ids when something
    changed); nothing when the summaries are current. On a read-only connection nothing is stored and the
    views compute the missing part live. DuckDB's memory limit is lowered meanwhile (REFRESH_MEMORY_LIMIT).
    """
    started = time.perf_counter()
    if not _exists(con, "accuracy_summary_status"):
        return RefreshResult("no summaries")
    if is_read_only(con):
        return RefreshResult("read-only")
    if not is_stale(con):
        return RefreshResult("current")
    with _memory_cap(con, REFRESH_MEMORY_LIMIT):
        new, gone, groups = _refresh(con)
    return RefreshResult("refreshed", new, gone, groups, time.perf_counter() - started)
