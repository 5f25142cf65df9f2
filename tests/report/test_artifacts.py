"""The digests the Prefect flow posts: JSON-ready skill table and a short Markdown summary."""

from __future__ import annotations

import json

import duckdb
import pytest
from conftest import workspace_with
from report_warehouse import CUTOFFS

from dyadcast.report import report_summary_markdown, skill_table
from dyadcast.report.summary import CAUTION_TITLE, trust_sentence


def test_skill_table_is_json_ready_and_matches_the_view(ro) -> None:
    rows = skill_table(ro)
    json.dumps(rows)  # what create_table_artifact needs: no Timestamp, no NaN objects
    assert {(r["model"], r["horizon"]) for r in rows} == {(m, h) for m in ("persistence", "poisson_glm", "tweedie_gbm")
                                                           for h in (1, 2, 3)}
    view = ro.execute("SELECT model, horizon, relative_wis FROM skill_vs_persistence "
                      "WHERE level = 'dyad' AND vintage = 'latest'").fetchall()
    by_key = {(r["model"], r["horizon"]): r for r in rows}
    for model, horizon, relative in view:
        assert by_key[(model, horizon)]["relative_wis"] == pytest.approx(relative)
    assert all(0 <= r["coverage_90"] <= 1 for r in rows)


def test_summary_markdown_has_caution_sentence_and_world_forecast(ro) -> None:
    text = report_summary_markdown(ro, CUTOFFS[-1], "poisson_glm")
    assert text.startswith("# Forecast cycle 2025-03")
    assert CAUTION_TITLE in text
    skill = ro.execute("SELECT * FROM skill_vs_persistence").fetchdf()
    assert trust_sentence(skill).replace("_", "\\_") in text
    assert "## World total forecast (poisson\\_glm)" in text and "| 2025-04 |" in text
    assert "## Files in quarantine" in text


def test_digests_on_an_empty_warehouse(tmp_path) -> None:
    ws = workspace_with(tmp_path, None)
    con = duckdb.connect(str(ws.warehouse_path), read_only=True)
    try:
        assert skill_table(con) == []
        text = report_summary_markdown(con, None)
    finally:
        con.close()
    assert "(no cutoff yet)" in text and "No forecast has been scored yet" in text
