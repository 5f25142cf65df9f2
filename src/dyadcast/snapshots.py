"""Immutable forecast snapshots: Hive-partitioned Parquet plus metadata, indexed in the warehouse.

In a local store a snapshot is written to a hidden temporary folder and renamed into place, so a reader never
sees a half-written run. An object store has no rename: the files are staged locally and uploaded one whole
object each, `metadata.json` last, and a run without it counts as absent (`dyadcast.stores`). Either way an
existing run is never touched again.
"""

from __future__ import annotations

import json
import os
import platform
import secrets
import shutil
import tempfile
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from datetime import UTC, date, datetime
from importlib import metadata as importlib_metadata
from pathlib import Path
from typing import Any

import duckdb
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq

from dyadcast import __version__
from dyadcast.models.base import quantile_column
from dyadcast.months import format_month
from dyadcast.stores import StorePath, commit_folder, list_runs, store_fs, store_location

FORECAST_FILE = "forecast.parquet"
METADATA_FILE = "metadata.json"
ARTIFACTS_DIR = "artifacts"
ARTIFACTS_KEY = "artifacts_dir"  # in a refreshed model's params: the folder of last month's model files
INDEXED_QUANTILES = (0.05, 0.25, 0.5, 0.75, 0.95)
LIBRARIES = ("dyadcast", "duckdb", "pandas", "pyarrow", "numpy", "scipy", "statsmodels", "lightgbm", "pyfixest",
             "prefect", "great-expectations")


class SnapshotExistsError(RuntimeError):
    pass


@dataclass(frozen=True)
class SnapshotRef:
    run_id: str
    cutoff: date
    model: str
    path: Path | StorePath


def new_run_id(now: datetime | None = None) -> str:
    """Sortable by time, unique across processes: 20261201T233000Z-3f9a1c."""
    now = now or datetime.now(UTC)
    return f"{now:%Y%m%dT%H%M%SZ}-{secrets.token_hex(3)}"


def library_versions() -> dict[str, str]:
    versions = {"python": platform.python_version()}
    for name in LIBRARIES:
        try:
            versions[name] = importlib_metadata.version(name)
        except importlib_metadata.PackageNotFoundError:
            continue
    versions["dyadcast"] = __version__
    return versions


def snapshot_dir(store: Path | str, cutoff: date, model: str, run_id: str) -> Path | StorePath:
    """The run folder: a `Path` in a local store, a `StorePath` (URL) in an object store."""
    return store_location(store) / f"cutoff={format_month(cutoff)}" / f"model={model}" / f"run={run_id}"


def _json_default(value: Any) -> Any:
    if isinstance(value, (date, datetime, pd.Timestamp)):
        return value.isoformat()
    if hasattr(value, "item"):
        return value.item()
    if isinstance(value, (set, tuple)):
        return list(value)
    if isinstance(value, Path):
        return str(value)
    raise TypeError(f"not JSON-serialisable: {type(value).__name__}")


def write_snapshot(
    store: Path | str,
    cutoff: date,
    model: str,
    run_id: str,
    forecast: pd.DataFrame,
    metadata: dict[str, Any],
    write_artifacts: Callable[[Path], Sequence[str]] | None = None,
) -> SnapshotRef:
    """Write forecast.parquet, artefacts and metadata.json so that the run appears complete or not at all."""
    final = snapshot_dir(store, cutoff, model, run_id)
    if isinstance(final, StorePath):
        return _write_to_object_store(final, cutoff, model, run_id, forecast, metadata, write_artifacts)
    if final.exists():
        raise SnapshotExistsError(f"{final} already exists; snapshots are immutable, use a new run id")
    final.parent.mkdir(parents=True, exist_ok=True)
    tmp = final.parent / f".tmp-{run_id}"
    if tmp.exists():
        shutil.rmtree(tmp)
    tmp.mkdir()
    try:
        _write_files(tmp, cutoff, model, run_id, forecast, metadata, write_artifacts)
        _fsync_dir(tmp)
        os.rename(tmp, final)
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise
    return SnapshotRef(run_id=run_id, cutoff=cutoff, model=model, path=final)


def _write_to_object_store(
    final: StorePath, cutoff: date, model: str, run_id: str, forecast: pd.DataFrame, metadata: dict[str, Any],
    write_artifacts: Callable[[Path], Sequence[str]] | None,
) -> SnapshotRef:
    """Stage the run locally (models write artefacts to a local folder), then upload it with the marker last."""
    if (final / METADATA_FILE).exists():
        raise SnapshotExistsError(f"{final} already exists; snapshots are immutable, use a new run id")
    with tempfile.TemporaryDirectory(prefix=f"dyadcast-snapshot-{run_id}-") as staging:
        _write_files(Path(staging), cutoff, model, run_id, forecast, metadata, write_artifacts)
        try:
            commit_folder(Path(staging), final, marker=METADATA_FILE)
        except FileExistsError as exc:  # another writer committed the same run id between check and upload
            raise SnapshotExistsError(str(exc)) from exc
    return SnapshotRef(run_id=run_id, cutoff=cutoff, model=model, path=final)


def _write_files(
    folder: Path, cutoff: date, model: str, run_id: str, forecast: pd.DataFrame, metadata: dict[str, Any],
    write_artifacts: Callable[[Path], Sequence[str]] | None,
) -> None:
    table = pa.Table.from_pandas(forecast.reset_index(drop=True), preserve_index=False)
    pq.write_table(table, folder / FORECAST_FILE, compression="zstd")
    artifact_names: list[str] = []
    if write_artifacts is not None:
        (folder / ARTIFACTS_DIR).mkdir()
        artifact_names = list(write_artifacts(folder / ARTIFACTS_DIR))
    meta = {
        **metadata,
        "run_id": run_id,
        "cutoff": format_month(cutoff),
        "model": model,
        "rows": int(len(forecast)),
        "artifacts": artifact_names,
        "written_at": datetime.now(UTC).isoformat(timespec="seconds"),
        "versions": library_versions(),
    }
    (folder / METADATA_FILE).write_text(json.dumps(meta, indent=2, default=_json_default), encoding="utf-8")


def _fsync_dir(directory: Path) -> None:
    for path in directory.rglob("*"):
        if path.is_file():
            with open(path, "rb") as handle:
                os.fsync(handle.fileno())


def read_metadata(path: Path | str) -> dict[str, Any]:
    location = store_location(path)
    if isinstance(location, StorePath):
        return json.loads((location / METADATA_FILE).read_bytes())
    return json.loads((location / METADATA_FILE).read_text(encoding="utf-8"))


def read_forecast(path: Path | str) -> pd.DataFrame:
    location = store_location(path)
    if isinstance(location, StorePath):
        with (location / FORECAST_FILE).open("rb") as handle:
            return pq.read_table(handle).to_pandas()
    return pq.read_table(location / FORECAST_FILE).to_pandas()


def index_snapshot(con: duckdb.DuckDBPyConnection, ref: SnapshotRef, run_kind: str, as_of: date) -> int:
    """Load a written snapshot into `snapshot_runs` / `forecast_rows` in one transaction; idempotent."""
    if con.execute("SELECT count(*) FROM snapshot_runs WHERE run_id = ?", [ref.run_id]).fetchone()[0]:
        return 0
    meta = read_metadata(ref.path)
    frame = read_forecast(ref.path)
    qcols = [quantile_column(q) for q in INDEXED_QUANTILES]
    rows = frame[["level", "origin", "destination", "horizon", "target_month", "mean", *qcols, "p_positive"]].copy()
    rows.insert(0, "run_kind", run_kind)
    rows.insert(0, "model", ref.model)
    rows.insert(0, "cutoff", pd.Timestamp(ref.cutoff))
    rows.insert(0, "run_id", ref.run_id)
    con.execute("BEGIN TRANSACTION")
    try:
        con.execute(
            "INSERT INTO snapshot_runs VALUES (?, ?, ?, ?, ?, ?, ?, ?)",
            [ref.run_id, ref.cutoff, ref.model, run_kind, as_of, datetime.now(UTC).replace(tzinfo=None),
             str(ref.path), json.dumps(meta, default=_json_default)],
        )
        con.register("_snapshot_rows", rows)
        con.execute(
            "INSERT INTO forecast_rows SELECT run_id, CAST(cutoff AS DATE), model, run_kind, level, origin, destination,"
            " CAST(horizon AS SMALLINT), CAST(target_month AS DATE), mean, q050, q250, q500, q750, q950, p_positive"
            " FROM _snapshot_rows"
        )
        con.unregister("_snapshot_rows")
        con.execute("COMMIT")
    except BaseException:
        con.execute("ROLLBACK")
        raise
    return len(rows)


def list_snapshots(store: Path | str) -> list[Path] | list[StorePath]:
    """Complete run folders only: temporary folders start with a dot; object-store runs need their marker."""
    location = store_location(store)
    if isinstance(location, StorePath):
        fs, _ = store_fs(location)
        return [StorePath(fs.unstrip_protocol(p)) for p in list_runs(location)]
    return sorted(p for p in location.glob("cutoff=*/model=*/run=*") if (p / METADATA_FILE).is_file())


def reindex_missing(con: duckdb.DuckDBPyConnection, store: Path | str) -> int:
    """Index snapshots present on disk but absent from the warehouse (e.g. after a crash between the two)."""
    known = {r[0] for r in con.execute("SELECT run_id FROM snapshot_runs").fetchall()}
    added = 0
    for path in list_snapshots(store):
        if path.name.removeprefix("run=") in known:  # the folder is named after the run: no read needed
            continue
        meta = read_metadata(path)
        if meta["run_id"] in known:
            continue
        ref = SnapshotRef(meta["run_id"], date.fromisoformat(meta["cutoff"] + "-01"), meta["model"], path)
        index_snapshot(con, ref, meta.get("run_kind", "monthly"), date.fromisoformat(meta["as_of"]))
        added += 1
    return added
