"""The accuracy log on disk: one Parquet file per scoring batch, written once, never rewritten.

A batch is written under a hidden temporary name and renamed into place inside the same DuckDB transaction
that inserts its rows into `accuracy_rows`: rename, then COMMIT. If the process dies between the two, the
file exists without its rows; `recover_batches` (run at the start of every scoring) inserts them, so the
table and the files always end up holding the same rows and nothing is scored twice.

In an object store (any fsspec URL but file://) there is no rename: the batch is written to a local
temporary file and `publish` uploads it with one PUT, which makes the object appear whole or not at all,
at the same point of the transaction as the rename. The crash cases are therefore the same: before the PUT
nothing is visible and the transaction rolls back; after it the object is recovered into the table. Batch
names are random and never reused; a retry re-scores only keys absent from the log, and the log is
recovered from the objects first, so a retry cannot double a batch.
"""

from __future__ import annotations

import os
import secrets
import tempfile
from datetime import UTC, datetime
from pathlib import Path

import duckdb
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq

from dyadcast.scoring.schema import ACCURACY_COLUMNS, ACCURACY_SCHEMA
from dyadcast.stores import StorePath, store_fs, store_location

BATCH_PREFIX = "accuracy_"
BATCH_SUFFIX = ".parquet"


def accuracy_directory(accuracy_dir: Path | str) -> Path | StorePath:
    """Where the log lives: a local folder (created if needed) or a location in an object store."""
    location = store_location(accuracy_dir)
    if isinstance(location, Path):
        location.mkdir(parents=True, exist_ok=True)
    return location


def new_batch_id(now: datetime | None = None) -> str:
    """Sortable by time and unique across processes, like run ids: 20261201T233000Z-3f9a1c."""
    now = now or datetime.now(UTC)
    return f"{now:%Y%m%dT%H%M%SZ}-{secrets.token_hex(3)}"


def batch_path(directory: Path | StorePath, batch_id: str) -> Path | StorePath:
    return directory / f"{BATCH_PREFIX}{batch_id}{BATCH_SUFFIX}"


def batch_id_of(path: Path | StorePath) -> str:
    return path.name[len(BATCH_PREFIX):-len(BATCH_SUFFIX)]


def list_batches(accuracy_dir: Path | str) -> list[Path] | list[StorePath]:
    """Published batch files in name (= time) order; hidden temporary files are skipped."""
    location = store_location(accuracy_dir)
    if isinstance(location, StorePath):
        fs, root = store_fs(location)
        found = fs.glob(f"{root}/{BATCH_PREFIX}*{BATCH_SUFFIX}")
        return sorted(StorePath(fs.unstrip_protocol(p)) for p in found)
    return sorted(location.glob(f"{BATCH_PREFIX}*{BATCH_SUFFIX}"))


def _read_batch(path: Path | StorePath) -> pa.Table:
    if isinstance(path, StorePath):
        with path.open("rb") as handle:
            return pq.read_table(handle)
    return pq.read_table(path)


def to_arrow(rows: pd.DataFrame) -> pa.Table:
    """Rows in the log's fixed column order and types, so every batch file has the same schema."""
    missing = [c for c in ACCURACY_COLUMNS if c not in rows.columns]
    if missing:
        raise ValueError(f"accuracy rows lack column(s) {missing}; build them with dyadcast.scoring.score_frame")
    return pa.Table.from_pandas(rows.loc[:, list(ACCURACY_COLUMNS)], schema=ACCURACY_SCHEMA, preserve_index=False)


def write_temporary(directory: Path | StorePath, batch_id: str, table: pa.Table) -> Path:
    """Write and fsync the batch under a hidden name; `publish` renames (or, to an object store, uploads) it.

    For an object store the temporary file is local (system temp folder): nothing reaches the store before
    the single PUT of `publish`.
    """
    name = f".{BATCH_PREFIX}{batch_id}{BATCH_SUFFIX}.tmp"
    tmp = (Path(tempfile.gettempdir()) if isinstance(directory, StorePath) else directory) / name
    pq.write_table(table, tmp, compression="zstd")
    with open(tmp, "rb") as handle:
        os.fsync(handle.fileno())
    return tmp


def publish(tmp: Path, final: Path | StorePath) -> None:
    if isinstance(final, StorePath):
        _upload(tmp, final)
        return
    if final.exists():
        raise FileExistsError(f"{final} already exists; accuracy batches are never overwritten")
    os.replace(tmp, final)
    fd = os.open(final.parent, os.O_RDONLY)
    try:
        os.fsync(fd)
    finally:
        os.close(fd)


def _upload(tmp: Path, final: StorePath) -> None:
    """One PUT: the batch object appears whole or not at all; the local temporary file goes afterwards."""
    fs, key = store_fs(final)
    if fs.exists(key):
        raise FileExistsError(f"{final} already exists; accuracy batches are never overwritten")
    fs.put_file(str(tmp), key)
    tmp.unlink(missing_ok=True)


def insert_rows(con: duckdb.DuckDBPyConnection, table: pa.Table) -> None:
    con.register("_accuracy_batch", table)
    try:
        con.execute("INSERT INTO accuracy_rows BY NAME SELECT * FROM _accuracy_batch")
    finally:
        con.unregister("_accuracy_batch")


def _insert_files(con: duckdb.DuckDBPyConnection, files: list[Path] | list[StorePath]) -> int:
    if not files:
        return 0
    before = con.execute("SELECT count(*) FROM accuracy_rows").fetchall()[0][0]  # fetchone leaves the result open
    if isinstance(files[0], StorePath):
        for path in files:  # read in Python through fsspec, one batch in memory at a time
            insert_rows(con, _read_batch(path))
    else:
        con.execute(
            "INSERT INTO accuracy_rows BY NAME SELECT * FROM read_parquet(?, union_by_name = true)",
            [[str(f) for f in files]],
        )
    return con.execute("SELECT count(*) FROM accuracy_rows").fetchall()[0][0] - before


def recover_batches(
    con: duckdb.DuckDBPyConnection, accuracy_dir: Path | str
) -> list[Path] | list[StorePath]:
    """Insert batch files whose rows are missing from `accuracy_rows` (a crash after rename/PUT, before commit)."""
    known = {r[0] for r in con.execute("SELECT DISTINCT batch_id FROM accuracy_rows").fetchall()}
    orphans = [p for p in list_batches(accuracy_dir) if batch_id_of(p) not in known]
    if orphans:
        con.execute("BEGIN TRANSACTION")
        try:
            _insert_files(con, orphans)
            con.execute("COMMIT")
        except BaseException:
            con.execute("ROLLBACK")
            raise
    return orphans


def rebuild_accuracy_index(con: duckdb.DuckDBPyConnection, accuracy_dir: Path | str) -> int:
    """Reload `accuracy_rows` from the Parquet files (the audit record); returns the number of rows.

    The fingerprint cache is cleared (the next scoring re-checks every target and appends only rows not in
    the files); MASE scales already used by logged rows are kept so later rows of a run reuse them.
    """
    files = list_batches(accuracy_directory(accuracy_dir))
    con.execute("BEGIN TRANSACTION")
    try:
        con.execute("DELETE FROM accuracy_rows")
        con.execute("DELETE FROM scoring_checks")
        n = _insert_files(con, files)
        con.execute(
            "INSERT OR IGNORE INTO run_naive_scales "
            "SELECT run_id, level, any_value(naive_scale), NULL, now()::TIMESTAMP FROM accuracy_rows GROUP BY run_id, level"
        )
        con.execute("COMMIT")
    except BaseException:
        con.execute("ROLLBACK")
        raise
    return n


def read_accuracy_log(accuracy_dir: Path | str) -> pd.DataFrame:
    """Every row of every batch file (for audits and tests; analysts query `accuracy_rows` instead)."""
    files = list_batches(accuracy_dir)
    if not files:
        return ACCURACY_SCHEMA.empty_table().to_pandas()
    return pa.concat_tables([_read_batch(f) for f in files]).to_pandas()
