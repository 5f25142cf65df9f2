"""Snapshot and accuracy stores addressed by fsspec URL (a local folder by default).

Local folders get atomicity from `rename`: a run folder appears complete or not at all. Object stores
(s3://, gs://, abfs://) have no rename, so a run is committed by writing `metadata.json` LAST: readers
treat a `run=` folder without it as not there (`dyadcast.snapshots.list_snapshots` already does), and
`clean_incomplete` removes what a killed run left behind. Call the cleaners only while holding the
workspace run lock (`dyadcast.runlock`), so that no live writer's temporary files are removed.
"""

from __future__ import annotations

import posixpath
import time
from collections.abc import Callable, Sequence
from pathlib import Path

import fsspec
from fsspec import AbstractFileSystem

METADATA_FILE = "metadata.json"  # same name as dyadcast.snapshots.METADATA_FILE: the commit marker
SNAPSHOT_TEMP_GLOBS = ("cutoff=*/model=*/.tmp-*",)  # dyadcast.snapshots.write_snapshot's temporary folders
ACCURACY_TEMP_GLOBS = (".accuracy_*.tmp",)  # dyadcast.scoring.store.write_temporary's unpublished batches
RUN_GLOB = "cutoff=*/model=*/run=*"


def store_fs(url: str | Path) -> tuple[AbstractFileSystem, str]:
    """File system and root path for a URL or local path."""
    fs, root = fsspec.core.url_to_fs(str(url))
    return fs, root.rstrip("/") or "/"


def is_local(url: str | Path) -> bool:
    fs, _ = store_fs(url)
    return "file" in (fs.protocol if isinstance(fs.protocol, tuple) else (fs.protocol,))


def _age_s(fs: AbstractFileSystem, path: str) -> float:
    """Seconds since the newest file under `path` changed; inf when the store keeps no times."""
    newest = None
    for info in [fs.info(path), *fs.find(path, withdirs=False, detail=True).values()]:
        stamp = info.get("mtime") or info.get("LastModified") or info.get("created")
        if stamp is None:
            continue
        value = stamp.timestamp() if hasattr(stamp, "timestamp") else float(stamp)
        newest = value if newest is None else max(newest, value)
    return float("inf") if newest is None else time.time() - newest


def clean_temporary(
    url: str | Path, globs: Sequence[str] = SNAPSHOT_TEMP_GLOBS, min_age_s: float = 0.0,
    log: Callable[[str], None] = print,
) -> list[str]:
    """Remove temporary files and folders a killed run left (e.g. `.tmp-<run id>` snapshot folders)."""
    fs, root = store_fs(url)
    removed = []
    for pattern in globs:
        for path in sorted(fs.glob(posixpath.join(root, pattern))):
            if _age_s(fs, path) < min_age_s:
                continue
            fs.rm(path, recursive=True)
            removed.append(path)
    if removed:
        log(f"  removed {len(removed)} unfinished temporary item(s) left by an interrupted run: "
            + ", ".join(posixpath.relpath(p, root) for p in removed[:5]) + (" ..." if len(removed) > 5 else ""))
    return removed


def list_runs(url: str | Path) -> list[str]:
    """Committed run folders only: the ones whose metadata.json (written last) exists."""
    fs, root = store_fs(url)
    return sorted(p for p in fs.glob(posixpath.join(root, RUN_GLOB)) if fs.exists(posixpath.join(p, METADATA_FILE)))


def clean_incomplete(url: str | Path, min_age_s: float = 0.0, log: Callable[[str], None] = print) -> list[str]:
    """Remove `run=` folders without their commit marker (object stores: an upload cut short)."""
    fs, root = store_fs(url)
    committed = set(list_runs(url))
    stale = [p for p in sorted(fs.glob(posixpath.join(root, RUN_GLOB)))
             if p not in committed and _age_s(fs, p) >= min_age_s]
    for path in stale:
        fs.rm(path, recursive=True)
    if stale:
        log(f"  removed {len(stale)} incomplete run folder(s) without {METADATA_FILE}")
    return stale


def commit_folder(local_dir: Path, url: str, marker: str = METADATA_FILE) -> str:
    """Copy a finished local folder to `url` with the marker file last; refuses to overwrite a run."""
    fs, dest = store_fs(url)
    if fs.exists(posixpath.join(dest, marker)):
        raise FileExistsError(f"{url} is already committed; snapshots are immutable, use a new run id")
    files = sorted(p for p in Path(local_dir).rglob("*") if p.is_file())
    if not any(p.name == marker and p.parent == Path(local_dir) for p in files):
        raise FileNotFoundError(f"{local_dir} has no {marker}; write it before committing the folder")
    ordered = [p for p in files if p != Path(local_dir) / marker] + [Path(local_dir) / marker]
    for path in ordered:
        target = posixpath.join(dest, path.relative_to(local_dir).as_posix())
        fs.makedirs(posixpath.dirname(target), exist_ok=True)
        fs.put_file(str(path), target)
    return dest
