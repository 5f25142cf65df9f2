"""Snapshot and accuracy stores addressed by fsspec URL (a local folder by default).

Local folders get atomicity from `rename`: a run folder appears complete or not at all. Object stores
(s3://, gs://, abfs://) have no rename, only whole-object PUTs, so a run is committed by writing
`metadata.json` LAST: readers treat a `run=` folder without it as not there, and `clean_incomplete` removes
what a killed run left behind. Call the cleaners only while holding the workspace run lock
(`dyadcast.runlock`), so that no live writer's files are removed. A plain local path never goes through
fsspec, so the local layout and behaviour stay exactly those of a folder.
"""

from __future__ import annotations

import posixpath
import time
from collections.abc import Callable, Sequence
from pathlib import Path
from typing import IO, Any

import fsspec
from fsspec import AbstractFileSystem

METADATA_FILE = "metadata.json"  # same name as dyadcast.snapshots.METADATA_FILE: the commit marker
SNAPSHOT_TEMP_GLOBS = ("cutoff=*/model=*/.tmp-*",)  # dyadcast.snapshots.write_snapshot's temporary folders
ACCURACY_TEMP_GLOBS = (".accuracy_*.tmp",)  # dyadcast.scoring.store.write_temporary's unpublished batches
RUN_GLOB = "cutoff=*/model=*/run=*"
# fsspec protocols that cannot take writes (or only through a cache that would hide the commit marker)
READ_ONLY = frozenset({"http", "https", "github", "git", "gist", "zip", "tar", "libarchive", "data", "reference",
                       "hf", "dvc", "jlab", "jupyter", "pyscript", "simplecache", "filecache", "blockcache",
                       "cached"})
EXAMPLES = "a local folder, file:///abs/path, or an object-store URL such as s3://bucket/prefix or gs://bucket/prefix"


class StoreError(ValueError):
    """A store URL cannot be used; the message says why and what to change or install."""


class StorePath(str):
    """A file or folder in an object store, spelled as its full URL.

    It joins with `/` and answers `exists()`/`is_file()` like `pathlib.Path`, so code written for local run
    folders (`path / METADATA_FILE`) works on both; as a `str` it is stored and printed as the URL itself.
    """

    def __truediv__(self, name: str) -> StorePath:
        return StorePath(f"{self.rstrip('/')}/{name}")

    @property
    def name(self) -> str:
        return self.rstrip("/").rsplit("/", 1)[-1]

    @property
    def parent(self) -> StorePath:
        return StorePath(self.rstrip("/").rsplit("/", 1)[0])

    def fs(self) -> tuple[AbstractFileSystem, str]:
        return store_fs(self)

    def exists(self) -> bool:
        fs, path = self.fs()
        return fs.exists(path)

    def is_file(self) -> bool:
        fs, path = self.fs()
        return fs.isfile(path)

    def open(self, mode: str = "rb") -> IO[Any]:
        fs, path = self.fs()
        return fs.open(path, mode)

    def read_bytes(self) -> bytes:
        fs, path = self.fs()
        return fs.cat_file(path)


def _is_url(text: str) -> bool:
    return "://" in text or "::" in text


def check_store_text(text: str) -> None:
    """Checks that need no backend installed: the mistakes a hand-edited dyadcast.toml makes."""
    if not _is_url(text):
        return
    if "::" in text:
        raise StoreError("chained URLs (cache::...) are not supported: a local cache would hide the commit "
                         f"marker from other readers; use {EXAMPLES}")
    scheme, rest = text.split("://", 1)
    protocol = scheme.lower()
    if protocol not in {*fsspec.available_protocols(), *fsspec.registry}:  # known, or registered at run time
        raise StoreError(f"fsspec knows no protocol {scheme!r}; use {EXAMPLES}")
    if protocol in READ_ONLY:
        raise StoreError(f"{scheme}:// is read-only; a store must take writes; use {EXAMPLES}")
    if "?" in rest or "#" in rest:
        raise StoreError("put no options in the URL; give them through the backend's environment variables "
                         "(e.g. AWS_PROFILE, FSSPEC_S3_ENDPOINT_URL) and leave only protocol://bucket/prefix")
    if protocol in ("file", "local"):
        if not rest.startswith("/"):
            raise StoreError("a file URL needs an absolute path with three slashes: file:///abs/path")
    elif not rest.strip("/"):
        raise StoreError(f"name a bucket and a prefix after {scheme}://, e.g. {scheme}://bucket/dyadcast/snapshots")


def store_fs(url: str | Path) -> tuple[AbstractFileSystem, str]:
    """File system and root path for a URL or local path; a missing backend says what to install."""
    try:
        fs, root = fsspec.core.url_to_fs(str(url))
    except ImportError as exc:
        raise StoreError(f"store {str(url)!r}: {exc} (pip install it into the environment that runs dyadcast); "
                         "credentials come from that backend's usual environment variables or files") from exc
    except ValueError as exc:
        raise StoreError(f"store {str(url)!r}: {exc}; use {EXAMPLES}") from exc
    return fs, root.rstrip("/") or "/"


def _protocols(fs: AbstractFileSystem) -> tuple[str, ...]:
    return fs.protocol if isinstance(fs.protocol, tuple) else (fs.protocol,)


def is_local(url: str | Path) -> bool:
    if not _is_url(str(url)):
        return True
    fs, _ = store_fs(url)
    return "file" in _protocols(fs)


def store_location(store: str | Path) -> Path | StorePath:
    """A `Path` for local stores (plain paths untouched, file:// URLs unwrapped), a `StorePath` otherwise."""
    if isinstance(store, Path) or not _is_url(str(store)):
        return Path(store)
    check_store_text(str(store))
    fs, root = store_fs(store)
    if "file" in _protocols(fs):
        return Path(root)
    return StorePath(fs.unstrip_protocol(root))


def resolve_store(value: str, default: Path, base: Path) -> str:
    """The store a workspace uses: `default` when empty, local paths relative to `base`, URLs canonical."""
    if not value:
        return str(default)
    location = store_location(value) if _is_url(value) else (base / Path(value).expanduser()).resolve()
    return str(location)


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
    """Remove what a killed writer left: temporary items matching `globs` (e.g. `.tmp-<run id>` folders).

    On an object store the snapshot writer's leftovers are run folders without their marker (an upload cut
    short), so cleaning the snapshot store there also runs `clean_incomplete`.
    """
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
    if tuple(globs) == SNAPSHOT_TEMP_GLOBS and "file" not in _protocols(fs):
        removed += clean_incomplete(url, min_age_s, log)
    return removed


def list_runs(url: str | Path) -> list[str]:
    """Committed run folders only (paths inside the file system): those whose metadata.json exists."""
    fs, root = store_fs(url)
    # one listing of the markers, not one existence check per run (a request each on an object store)
    return sorted(posixpath.dirname(p) for p in fs.glob(posixpath.join(root, RUN_GLOB, METADATA_FILE)))


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
    """Copy a finished local folder to `url` with the marker file last; refuses to overwrite a run.

    Each file is one PUT (an object appears whole or not at all); objects of an earlier attempt that never
    got its marker are removed first, since no reader can have seen them.
    """
    fs, dest = store_fs(url)
    if fs.exists(posixpath.join(dest, marker)):
        raise FileExistsError(f"{url} is already committed; snapshots are immutable, use a new run id")
    files = sorted(p for p in Path(local_dir).rglob("*") if p.is_file())
    if not any(p.name == marker and p.parent == Path(local_dir) for p in files):
        raise FileNotFoundError(f"{local_dir} has no {marker}; write it before committing the folder")
    if fs.exists(dest):
        fs.rm(dest, recursive=True)
    local = "file" in _protocols(fs)
    ordered = [p for p in files if p != Path(local_dir) / marker] + [Path(local_dir) / marker]
    for path in ordered:
        target = posixpath.join(dest, path.relative_to(local_dir).as_posix())
        if local:  # object stores have no folders (and s3fs.makedirs may try to create the bucket)
            fs.makedirs(posixpath.dirname(target), exist_ok=True)
        fs.put_file(str(path), target)
    return dest
