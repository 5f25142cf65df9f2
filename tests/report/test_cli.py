"""`dyadcast sql` (read-only, table or CSV) and `dyadcast report` from the command line."""

from __future__ import annotations

import io
import subprocess
import sys
import time

import duckdb
import pandas as pd
import pytest
from click.testing import CliRunner
from conftest import workspace_with

from dyadcast.cli import main
from dyadcast.report import analyst
from dyadcast.warehouse import sql_dir


def sql(ws, *args: str):  # noqa: ANN001, ANN201
    return CliRunner().invoke(main, ["sql", "--workspace", str(ws.root), *args])


def test_table_output_is_aligned_with_a_row_count(ws_fixture) -> None:
    result = sql(ws_fixture, "SELECT kind, files_loaded FROM data_freshness")
    assert result.exit_code == 0, result.output
    lines = result.output.splitlines()
    assert lines[0].split() == ["kind", "files_loaded"] and lines[-1] == "(5 rows)"
    assert len({len(line) for line in lines[:-1]}) == 1, "every line of the table has the same width"
    assert "NULL" in sql(ws_fixture, "SELECT latest_period FROM data_freshness").output


def test_csv_output_round_trips(ws_fixture) -> None:
    query = "SELECT model, horizon, relative_wis FROM skill_vs_persistence ORDER BY ALL"
    result = sql(ws_fixture, "--csv", query)
    assert result.exit_code == 0, result.output
    parsed = pd.read_csv(io.StringIO(result.output))
    con = duckdb.connect(str(ws_fixture.warehouse_path), read_only=True)
    direct = con.execute(query).fetchdf()
    con.close()
    assert parsed.model.tolist() == direct.model.tolist()
    assert parsed.relative_wis.to_numpy() == pytest.approx(direct.relative_wis.to_numpy())


def test_example_query_file_runs(ws_fixture) -> None:
    result = sql(ws_fixture, "--file", str(sql_dir() / "queries" / "coverage_by_destination.sql"))
    assert result.exit_code == 0, result.output
    assert result.output.splitlines()[0].split()[:3] == ["model", "destination", "n"]


@pytest.mark.parametrize("statement, kind", [
    ("INSERT INTO loads SELECT * FROM loads", "INSERT"),
    ("UPDATE loads SET row_count = 0", "UPDATE"),
    ("DELETE FROM accuracy_rows", "DELETE"),
    ("CREATE TABLE x AS SELECT 1", "CREATE"),
    ("DROP VIEW forecasts_all", "DROP"),
    ("ATTACH ':memory:' AS other", "ATTACH"),
    ("COPY loads TO 'loads.csv'", "COPY"),
    ("SELECT 1; DELETE FROM loads", "DELETE"),
])
def test_writes_are_refused_with_a_clear_message(ws_fixture, tmp_path, monkeypatch, statement, kind) -> None:
    monkeypatch.chdir(tmp_path)
    before = ws_fixture.warehouse_path.stat().st_mtime_ns
    result = sql(ws_fixture, statement)
    assert result.exit_code == 1
    assert f"is {kind}: `dyadcast sql` only reads" in result.output
    assert ws_fixture.warehouse_path.stat().st_mtime_ns == before and not (tmp_path / "loads.csv").exists()


def test_duckdb_read_only_mode_is_the_second_lock(ws_fixture, monkeypatch) -> None:
    """Even if the statement check let a write through, the read-only connection refuses it; the error
    is translated into the same plain message."""
    monkeypatch.setattr(analyst, "ALLOWED", {"SELECT", "INSERT"})
    result = sql(ws_fixture, "INSERT INTO rejected_files SELECT * FROM rejected_files")
    assert result.exit_code == 1
    assert "the query tried to write" in result.output and "only reads" in result.output


def test_errors_are_plain(ws_fixture, tmp_path) -> None:
    assert "does not parse" in sql(ws_fixture, "SELEC 1").output
    assert "the query failed" in sql(ws_fixture, "SELECT * FROM no_such_view").output
    assert "either a QUERY argument or --file" in sql(ws_fixture).output
    ws = workspace_with(tmp_path / "other", None)
    ws.warehouse_path.unlink()
    assert "no warehouse at" in sql(ws, "SELECT 1").output


def test_busy_warehouse_is_explained(ws_fixture) -> None:
    """A writer in another process holds DuckDB's file lock: the reader is told to retry later."""
    code = ("import duckdb, sys, time; c = duckdb.connect(sys.argv[1]); print('locked', flush=True); "
            "time.sleep(30)")
    holder = subprocess.Popen([sys.executable, "-c", code, str(ws_fixture.warehouse_path)], stdout=subprocess.PIPE,
                              text=True)
    try:
        assert holder.stdout.readline().strip() == "locked"
        time.sleep(0.1)
        result = sql(ws_fixture, "SELECT 1")
    finally:
        holder.kill()
        holder.wait(timeout=10)
    assert result.exit_code == 1 and "retry when the run has finished" in result.output


def test_report_command(ws_fixture) -> None:
    result = CliRunner().invoke(main, ["report", "--workspace", str(ws_fixture.root), "--cutoff", "2025-02",
                                       "--summary"])
    assert result.exit_code == 0, result.output
    assert "report written:" in result.output and "# Forecast cycle 2025-02" in result.output
    assert (ws_fixture.reports / "accuracy_2025-02.html").is_file()
    bad = CliRunner().invoke(main, ["report", "--workspace", str(ws_fixture.root), "--cutoff", "2025-13"])
    assert bad.exit_code == 2 and "YYYY-MM" in bad.output


def test_query_may_start_with_a_comment(ws_fixture) -> None:
    result = sql(ws_fixture, "-- how many runs?\nSELECT count(*) AS runs FROM snapshot_runs")
    assert result.exit_code == 0, result.output
    assert result.output.split() == ["runs", "50", "(1", "row)"]
