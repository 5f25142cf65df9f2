"""Where a workspace keeps its files; the one place that knows the layout of DESIGN.md."""

from __future__ import annotations

import os
from dataclasses import dataclass
from pathlib import Path

from dyadcast.config import DEFAULT_TOML, Config, load_config
from dyadcast.stores import resolve_store

CONFIG_NAME = "dyadcast.toml"
SUBDIRS = ("inbox", "archive", "quarantine", "snapshots", "accuracy", "reports")


class WorkspaceError(RuntimeError):
    """The folder is not a usable workspace; the message says what to run."""


@dataclass(frozen=True)
class Workspace:
    root: Path

    @property
    def config_path(self) -> Path:
        return self.root / CONFIG_NAME

    @property
    def inbox(self) -> Path:
        return self.root / "inbox"

    @property
    def archive(self) -> Path:
        return self.root / "archive"

    @property
    def quarantine(self) -> Path:
        return self.root / "quarantine"

    @property
    def warehouse_path(self) -> Path:
        return self.root / "warehouse.duckdb"

    @property
    def snapshots(self) -> Path:
        return self.root / "snapshots"

    @property
    def accuracy(self) -> Path:
        return self.root / "accuracy"

    @property
    def reports(self) -> Path:
        return self.root / "reports"

    @property
    def prefect_home(self) -> Path:
        return self.root / ".prefect"

    @property
    def lock_path(self) -> Path:
        return self.root / ".run.lock"

    def config(self) -> Config:
        return load_config(self.config_path)

    def snapshot_store(self) -> str:
        """`[stores] snapshot`: DIR/snapshots when empty, a local path (relative to DIR) or an fsspec URL.

        Raises `dyadcast.stores.StoreError` (saying what to install) when the URL's backend is missing.
        """
        return resolve_store(self.config().snapshot_store, self.snapshots, self.root)

    def accuracy_store(self) -> str:
        """`[stores] accuracy`: DIR/accuracy when empty, otherwise as `snapshot_store`."""
        return resolve_store(self.config().accuracy_store, self.accuracy, self.root)


def init_workspace(directory: str | os.PathLike[str]) -> Workspace:
    """Create the layout; an existing configuration is kept so that init never destroys settings."""
    root = Path(directory).resolve()
    root.mkdir(parents=True, exist_ok=True)
    for name in SUBDIRS:
        (root / name).mkdir(exist_ok=True)
    config = root / CONFIG_NAME
    if not config.exists():
        config.write_text(DEFAULT_TOML, encoding="utf-8")
    return Workspace(root)


def resolve_workspace_dir(directory: str | os.PathLike[str] | None) -> Path:
    if directory:
        return Path(directory)
    env = os.environ.get("DYADCAST_WORKSPACE")
    return Path(env) if env else Path.cwd()


def open_workspace(directory: str | os.PathLike[str] | None = None) -> Workspace:
    """Open an existing workspace (argument, then DYADCAST_WORKSPACE, then the current folder)."""
    root = resolve_workspace_dir(directory).resolve()
    if not (root / CONFIG_NAME).is_file():
        raise WorkspaceError(
            f"{root} is not a dyadcast workspace (no {CONFIG_NAME} there). "
            f"Create one with `dyadcast init {root}` or pass --workspace DIR / set DYADCAST_WORKSPACE."
        )
    missing = [name for name in SUBDIRS if not (root / name).is_dir()]
    if missing:
        raise WorkspaceError(f"{root} lacks the folder(s) {missing}; run `dyadcast init {root}` to restore them.")
    return Workspace(root)
