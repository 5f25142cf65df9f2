"""Load a validated drop in one transaction and move files without ever overwriting or losing one.

Order of events for an accepted file: BEGIN → `loads` row (with the archive name it will get) → detail row
→ raw rows in chunks → COMMIT → move to `archive/`. A kill before COMMIT leaves no rows and the file in
the inbox; a kill after COMMIT leaves the file in the inbox with its hash in `loads`, and the next run only
moves it to the archive name recorded in `loads.archived_as`.
"""

from __future__ import annotations

import os
from collections.abc import Callable
from dataclasses import dataclass
from datetime import UTC, date, datetime
from pathlib import Path

import duckdb
import pyarrow as pa
import pyarrow.compute as pc

from dyadcast.ingest.kinds import PUBLISHED_ON, Kind
from dyadcast.ingest.read import Drop

CHUNK_ROWS = 500_000


def utc_now() -> datetime:
    """Naive UTC timestamp, the convention of every TIMESTAMP column written by ingest."""
    return datetime.now(UTC).replace(tzinfo=None)


@dataclass(frozen=True)
class EarlierLoad:
    load_id: int
    file_name: str
    kind: str
    loaded_at: datetime
    archived_as: str | None

    def describe(self) -> str:
        return f"load {self.load_id} of {self.file_name} on {self.loaded_at:%Y-%m-%d %H:%M} UTC"


def find_load(con: duckdb.DuckDBPyConnection, sha256: str) -> EarlierLoad | None:
    row = con.execute(
        "SELECT load_id, file_name, kind, loaded_at, archived_as FROM loads WHERE content_sha256 = ?", [sha256]
    ).fetchone()
    return EarlierLoad(*row) if row else None


def _dates(column: pa.ChunkedArray, fmt: str = "%Y-%m-%d") -> pa.ChunkedArray:
    return pc.strptime(column, format=fmt, unit="s").cast(pa.date32())


def typed_table(drop: Drop, kind: Kind, default_published: date) -> pa.Table:
    """The validated text columns cast to the types of the kind's raw table (published_on included)."""
    text = drop.table
    columns: dict[str, pa.ChunkedArray | pa.Array] = {}
    numbers = {n.column: n for n in kind.numbers}
    for name in kind.columns:
        column = text.column(name)
        if name == kind.month:
            columns[name] = _dates(pc.binary_join_element_wise(column, "-01", ""))
        elif name == kind.date:
            columns[name] = _dates(column)
        elif name in kind.counts:
            columns[name] = column.cast(pa.int64())
        elif name in kind.flags:
            columns[name] = column.cast(pa.int16())
        elif name in numbers:
            if numbers[name].optional:
                column = pc.if_else(pc.equal(column, ""), pa.scalar(None, pa.string()), column)
            columns[name] = column.cast(pa.float64())
        else:
            columns[name] = column
    if PUBLISHED_ON in text.column_names:
        columns[PUBLISHED_ON] = _dates(text.column(PUBLISHED_ON))
    else:
        columns[PUBLISHED_ON] = pa.repeat(pa.scalar(default_published, pa.date32()), text.num_rows)
    return pa.table(columns)


@dataclass(frozen=True)
class LoadRecord:
    """What `loads` and `load_details` say about one file, computed before the transaction starts."""

    file_name: str
    kind: str
    sha256: str
    source_format: str
    source_bytes: int
    publication_source: str
    notes: str | None


def commit_load(
    con: duckdb.DuckDBPyConnection,
    typed: pa.Table,
    kind: Kind,
    record: LoadRecord,
    progress: Callable[[str], None] | None = None,
    chunk_rows: int = CHUNK_ROWS,
) -> tuple[int, str]:
    """Insert the bookkeeping rows and every raw row in one transaction; returns (load_id, archived_as)."""
    published = typed.column(PUBLISHED_ON)
    first, last = pc.min(published).as_py(), pc.max(published).as_py()
    vintages = len(pc.unique(published))
    period = typed.column(kind.period) if kind.period else None
    period_first = pc.min(period).as_py() if period is not None else None
    period_last = pc.max(period).as_py() if period is not None else None
    con.begin()
    try:
        load_id = int(con.execute("SELECT nextval('load_id_seq')").fetchone()[0])
        archived_as = f"archive/{load_id:06d}_{record.file_name}"
        con.execute(
            "INSERT INTO loads (load_id, file_name, kind, content_sha256, published_on, loaded_at, row_count, "
            "archived_as) VALUES (?, ?, ?, ?, ?, ?, ?, ?)",
            [load_id, record.file_name, record.kind, record.sha256, last, utc_now(), typed.num_rows, archived_as],
        )
        con.execute(
            "INSERT INTO load_details VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?)",
            [load_id, record.source_format, record.source_bytes, record.publication_source, first, last,
             vintages, period_first, period_last, record.notes],
        )
        for start in range(0, typed.num_rows, chunk_rows):
            chunk = typed.slice(start, chunk_rows)
            chunk = chunk.append_column("load_id", pa.repeat(pa.scalar(load_id, pa.int64()), chunk.num_rows))
            con.register("dyadcast_ingest_chunk", chunk)
            try:
                con.execute(f"INSERT INTO {kind.table} BY NAME SELECT * FROM dyadcast_ingest_chunk")
            finally:
                con.unregister("dyadcast_ingest_chunk")
            if progress and typed.num_rows > chunk_rows:
                done = min(start + chunk_rows, typed.num_rows)
                progress(f"  {record.file_name}: {done:,} of {typed.num_rows:,} rows inserted (not yet committed)")
        con.commit()
    except BaseException:
        con.rollback()
        raise
    return load_id, archived_as


def move_no_clobber(source: Path, target: Path) -> None:
    """Move within one file system, refusing to replace an existing file (os.replace would overwrite it)."""
    target.parent.mkdir(parents=True, exist_ok=True)
    try:
        os.link(source, target)  # atomic, and fails with FileExistsError if the target exists
    except FileExistsError:
        raise
    except OSError:  # no hard links here (e.g. some network or FAT drives): check, then rename
        if target.exists():
            raise FileExistsError(f"{target} already exists") from None
        os.rename(source, target)
        return
    os.unlink(source)


def free_name(folder: Path, name: str) -> Path:
    """`folder/name`, or `folder/name` with a UTC time stamp in front when that name is taken."""
    target = folder / name
    if not target.exists():
        return target
    stamp = utc_now().strftime("%Y%m%dT%H%M%S%f")
    return folder / f"{stamp}_{name}"


def record_rejection(
    con: duckdb.DuckDBPyConnection, file_name: str, kind: str | None, sha256: str | None, reason: str, report: str | None
) -> None:
    con.execute(
        "INSERT INTO rejected_files (file_name, kind, content_sha256, rejected_at, reason, report_path) "
        "VALUES (?, ?, ?, ?, ?, ?)",
        [file_name, kind, sha256, utc_now(), reason, report],
    )


def record_event(
    con: duckdb.DuckDBPyConnection,
    file_name: str,
    status: str,
    kind: str | None,
    sha256: str | None,
    load_id: int | None,
    rows: int | None,
    reason: str,
    moved_to: str | None,
) -> None:
    con.execute(
        "INSERT INTO ingest_events VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?)",
        [utc_now(), file_name, status, kind, sha256, load_id, rows, reason, moved_to],
    )
