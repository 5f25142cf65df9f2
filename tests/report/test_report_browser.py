"""The report opened in headless Chromium: it loads, logs no error, asks the network for nothing, runs no
script, and shows a label full of markup as plain text. A screenshot is kept under tests/artifacts/."""

from __future__ import annotations

from pathlib import Path

import duckdb
import pytest
from chromium_page import chromium_available, visit
from conftest import XSS, workspace_with

from dyadcast.report import build_report
from dyadcast.report.summary import CAUTION_TITLE

ARTIFACTS = Path(__file__).resolve().parents[1] / "artifacts"

pytestmark = pytest.mark.skipif(
    not chromium_available(),
    reason="Chromium is not installed (/usr/bin/chromium); install it with `apt-get install -y chromium`",
)


def _open(tmp_path: Path, warehouse: str, shot_name: str):  # noqa: ANN202 - a PageVisit
    ws = workspace_with(tmp_path, warehouse)
    con = duckdb.connect(warehouse, read_only=True)
    try:
        page = build_report(con, ws)
    finally:
        con.close()
    ARTIFACTS.mkdir(exist_ok=True)
    profile = tmp_path / "chromium-profile"
    profile.mkdir()
    return visit(page, ARTIFACTS / shot_name, profile)


def test_report_loads_offline_without_errors(tmp_path, fixture_wh) -> None:
    seen = _open(tmp_path, fixture_wh.path, "report_fixture.png")
    assert seen.loaded, "the load event fired"
    assert seen.network_requests == [], "the page fetched nothing"
    assert seen.requests and all(u.startswith("file:") for u in seen.requests), "only the file itself was read"
    assert seen.console_errors == []
    assert seen.script_count == 0
    assert seen.title == "Arrivals forecast and accuracy, 2025-03"
    assert CAUTION_TITLE in seen.body_text and "Which model to trust" in seen.body_text
    assert seen.height > 3000, "the whole report rendered, not an error page"
    assert (ARTIFACTS / "report_fixture.png").stat().st_size > 50_000


def test_markup_in_a_label_renders_as_text(tmp_path, xss_wh) -> None:
    seen = _open(tmp_path, xss_wh.path, "report_markup_label.png")
    assert seen.loaded and seen.console_errors == [] and seen.network_requests == []
    assert seen.script_count == 0, "the label did not become a <script> element"
    assert f"Into {XSS}" in seen.body_text, "the browser shows the label's characters as text"
    assert "<img src=x onerror=alert(2)>" in seen.body_text
