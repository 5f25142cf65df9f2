"""Fixture warehouses for the report tests, built once per session (see report_warehouse.py)."""

from __future__ import annotations

import shutil
from pathlib import Path

import duckdb
import pytest
from report_warehouse import Fixture, build_fixture

from dyadcast.warehouse import apply_sql
from dyadcast.workspace import Workspace, init_workspace

XSS = "<script>alert(1)</script>"


@pytest.fixture(scope="session")
def fixture_wh(tmp_path_factory: pytest.TempPathFactory) -> Fixture:
    return build_fixture(str(tmp_path_factory.mktemp("wh") / "warehouse.duckdb"))


@pytest.fixture(scope="session")
def xss_wh(tmp_path_factory: pytest.TempPathFactory) -> Fixture:
    return build_fixture(str(tmp_path_factory.mktemp("xss") / "warehouse.duckdb"), big_destination=XSS, xss=True)


def workspace_with(tmp_path: Path, warehouse: str | None, toml: str = "") -> Workspace:
    """A workspace whose warehouse is a copy of `warehouse` (or a fresh, empty one)."""
    ws = init_workspace(tmp_path / "ws")
    if toml:
        ws.config_path.write_text(toml, encoding="utf-8")
    if warehouse:
        shutil.copy(warehouse, ws.warehouse_path)
    else:
        con = duckdb.connect(str(ws.warehouse_path))
        apply_sql(con)
        con.close()
    return ws


@pytest.fixture
def ws_fixture(tmp_path: Path, fixture_wh: Fixture) -> Workspace:
    return workspace_with(tmp_path, fixture_wh.path)


@pytest.fixture
def ro(fixture_wh: Fixture):  # noqa: ANN201 - a DuckDB connection
    con = duckdb.connect(fixture_wh.path, read_only=True)
    yield con
    con.close()


@pytest.fixture(scope="session")
def report_html(tmp_path_factory: pytest.TempPathFactory, fixture_wh: Fixture) -> str:
    """The report of the fixture warehouse at its newest cutoff, built once for the read-only checks."""
    from dyadcast.report import build_report

    ws = workspace_with(tmp_path_factory.mktemp("report"), fixture_wh.path)
    con = duckdb.connect(fixture_wh.path, read_only=True)
    try:
        return build_report(con, ws).read_text(encoding="utf-8")
    finally:
        con.close()
