"""Fixtures of the ingest tests: one Great Expectations context per session (its import costs ~8 s)."""

from __future__ import annotations

from collections.abc import Iterator
from pathlib import Path

import duckdb
import pytest

from dyadcast.warehouse import open_warehouse
from dyadcast.workspace import Workspace, init_workspace


@pytest.fixture(scope="session")
def gx_runner():
    from dyadcast.ingest.validate import get_runner

    return get_runner()


@pytest.fixture
def ws(tmp_path: Path) -> Workspace:
    return init_workspace(tmp_path / "ws")


@pytest.fixture
def con(ws: Workspace) -> Iterator[duckdb.DuckDBPyConnection]:
    with open_warehouse(ws.warehouse_path) as connection:
        yield connection
