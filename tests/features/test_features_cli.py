"""`dyadcast features` on a small invented workspace."""

from __future__ import annotations

import duckdb
from _feature_warehouse import load_drops, random_drops
from click.testing import CliRunner

from dyadcast.cli import main
from dyadcast.warehouse import apply_sql
from dyadcast.workspace import init_workspace


def test_features_command_reports_the_signal_choice(tmp_path):
    ws = init_workspace(tmp_path / "ws")
    con = duckdb.connect(str(ws.warehouse_path))
    apply_sql(con)
    load_drops(con, random_drops(3))
    con.close()
    out = tmp_path / "frame.parquet"
    result = CliRunner().invoke(main, ["features", "-w", str(ws.root), "--cutoff", "2023-04", "--as-of", "2023-06-01",
                                       "--out", str(out)])
    assert result.exit_code == 0, result.output
    assert "cutoff 2023-04 as of 2023-06-01" in result.output
    assert "signal search: lead" in result.output
    assert out.is_file()
    missing = CliRunner().invoke(main, ["features", "-w", str(ws.root), "--cutoff", "2021-04", "--as-of", "2021-05-01"])
    assert missing.exit_code != 0 and "load flows files first" in missing.output
