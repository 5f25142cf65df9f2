"""The accuracy views (sql/50-54) on a hand-made log, the table schema, and the `dyadcast score` command."""

from __future__ import annotations

from datetime import datetime
from pathlib import Path

import duckdb
import pandas as pd
import pytest
from _scoring_warehouse import add_flows, add_run, forecast_frame, new_warehouse
from click.testing import CliRunner

from dyadcast.cli import main
from dyadcast.scoring import ACCURACY_SCHEMA, score_pending
from dyadcast.scoring.summary import format_summary, summary_table
from dyadcast.workspace import init_workspace

DYADS = [(o, d) for o in ("QMA", "QMB") for d in ("XAA", "XAB")]


def _fill(con: duckdb.DuckDBPyConnection, persistence_dyads: list[tuple[str, str]] = DYADS) -> None:
    """Cutoff 2024-12 (as of 2025-01-10): poisson_glm mean 10, persistence mean 20 (h = 1), both with
    intervals at +-25 % / +-100 %. Actuals 2025-01: first release 12, 0, 3, 40 for QMA-XAA, QMB-XAA,
    QMA-XAB, QMB-XAB (load 2); a revision of XAB (load 3) makes them 12, 0, 5, 0."""
    add_flows(con, 1, "2025-01-10", [(o, d, "2024-12", 1) for o, d in DYADS])
    add_run(con, "r-glm", "2024-12", "poisson_glm", "2025-01-10", forecast_frame(DYADS, "2024-12", 1, mean=10.0))
    add_run(con, "r-pers", "2024-12", "persistence", "2025-01-10",
            forecast_frame(persistence_dyads, "2024-12", 1, mean=20.0))
    add_flows(con, 2, "2025-02-10", [("QMA", "XAA", "2025-01", 12), ("QMA", "XAB", "2025-01", 3),
                                     ("QMB", "XAB", "2025-01", 40)])


def _scored(log: Path) -> duckdb.DuckDBPyConnection:
    con = new_warehouse()
    _fill(con)
    score_pending(con, log)
    add_flows(con, 3, "2025-02-20", [("QMA", "XAB", "2025-01", 5)])
    score_pending(con, log)
    return con


@pytest.fixture(scope="module")
def scored(tmp_path_factory: pytest.TempPathFactory) -> duckdb.DuckDBPyConnection:
    """Shared by the tests that only read the views."""
    con = _scored(tmp_path_factory.mktemp("log"))
    yield con
    con.close()


@pytest.fixture()
def scored_own(tmp_path: Path) -> duckdb.DuckDBPyConnection:
    """For tests that add runs."""
    con = _scored(tmp_path / "log")
    yield con
    con.close()


def _summary(con: duckdb.DuckDBPyConnection, model: str, vintage: str, level: str = "dyad") -> pd.Series:
    frame = con.execute("SELECT * FROM accuracy_summary WHERE model = ? AND vintage = ? AND level = ?",
                        [model, vintage, level]).df()
    assert len(frame) == 1
    return frame.iloc[0]


def test_accuracy_summary_hand_computed(scored) -> None:
    first = _summary(scored, "poisson_glm", "first_release")
    # |10 - y| for y = 12, 0, 3, 40: 2, 10, 7, 30
    assert first["n"] == 4 and first["mae"] == pytest.approx(49 / 4)
    assert first["rmse"] == pytest.approx(((4 + 100 + 49 + 900) / 4) ** 0.5)
    assert first["bias"] == pytest.approx((-2 + 10 + 7 - 30) / 4)
    # 50 % interval [7.5, 12.5] covers 12 only; 90 % interval [0, 20] covers 12, 0, 3
    assert first["coverage_50"] == pytest.approx(0.25) and first["coverage_90"] == pytest.approx(0.75)
    assert first["exceedances"] == 1
    # every forecast says "positive" (p = 0.9); 3 of 4 actuals positive
    assert first["precision"] == pytest.approx(0.75) and first["recall"] == pytest.approx(1.0)
    # MASE scale: the history (one month per dyad) has no consecutive pair -> undefined
    assert pd.isna(first["mase"])
    latest = _summary(scored, "poisson_glm", "latest")
    assert latest["n"] == 4 and latest["mae"] == pytest.approx((2 + 10 + 5 + 10) / 4)  # y = 12, 0, 5, 0
    world = _summary(scored, "poisson_glm", "latest", "world_total")
    assert world["n"] == 1 and world["mae"] == pytest.approx(40 - 17)


def test_skill_vs_persistence(scored) -> None:
    skill = scored.execute("SELECT * FROM skill_vs_persistence WHERE vintage = 'latest' AND level = 'dyad'"
                           " ORDER BY model").df().set_index("model")
    glm = skill.loc["poisson_glm"]
    # persistence (mean 20): |20 - y| = 8, 20, 15, 20 -> 63; glm 2, 10, 5, 10 -> 27
    assert glm["relative_mae"] == pytest.approx(27 / 63)
    assert glm["n_common"] == 4 and not glm["sets_differ"] and pd.isna(glm["note"])
    rows = scored.execute("SELECT model, sum(wis) FROM accuracy_current WHERE vintage = 'latest' AND level = 'dyad'"
                          " GROUP BY model").fetchall()
    wis = dict(rows)
    assert glm["relative_wis"] == pytest.approx(wis["poisson_glm"] / wis["persistence"])
    assert skill.loc["persistence", "relative_wis"] == pytest.approx(1.0)


def test_skill_compares_only_common_targets(tmp_path: Path) -> None:
    con = new_warehouse()
    _fill(con, persistence_dyads=DYADS[:3])  # persistence has no forecast for QMB->XAB
    score_pending(con, tmp_path / "a")
    glm = con.execute("SELECT * FROM skill_vs_persistence WHERE model = 'poisson_glm' AND vintage = 'first_release'"
                      " AND level = 'dyad'").df().iloc[0]
    assert (glm["n_model"], glm["n_persistence"], glm["n_common"]) == (4, 3, 3)
    assert glm["sets_differ"] and "3 common targets" in glm["note"]
    # first release on the 3 common dyads: glm 2, 10, 7 = 19; persistence 8, 20, 17 = 45
    assert glm["relative_mae"] == pytest.approx(19 / 45)


def test_newest_rerun_wins(scored_own, tmp_path: Path) -> None:
    scored = scored_own
    add_run(scored, "r-glm-2", "2024-12", "poisson_glm", "2025-01-10", forecast_frame(DYADS, "2024-12", 1, mean=4.0),
            created_at=datetime(2030, 2, 1))
    assert score_pending(scored, tmp_path / "log").rows_written == 9 * 2
    first = _summary(scored, "poisson_glm", "first_release")
    assert first["n"] == 4 and first["mae"] == pytest.approx((8 + 4 + 1 + 36) / 4)  # only the rerun counts
    runs = scored.execute("SELECT DISTINCT run_id FROM accuracy_current WHERE model = 'poisson_glm'").fetchall()
    assert runs == [("r-glm-2",)]


def test_pooled_views_count_each_cutoff_once(scored_own, tmp_path: Path) -> None:
    scored = scored_own
    # A backtest of the same cutoff (different means) must not be pooled with the monthly runs.
    for run_id, model, mean in (("b-glm", "poisson_glm", 1.0), ("b-pers", "persistence", 2.0)):
        add_run(scored, run_id, "2024-12", model, "2025-01-10", forecast_frame(DYADS, "2024-12", 1, mean=mean),
                run_kind="backtest")
    score_pending(scored, tmp_path / "log")
    kinds = scored.execute("SELECT DISTINCT run_kind FROM accuracy_summary ORDER BY 1").fetchall()
    assert kinds == [("backtest",), ("monthly",)]
    skill = scored.execute("SELECT n_model, n_common, relative_mae FROM skill_vs_persistence WHERE model = "
                           "'poisson_glm' AND vintage = 'latest' AND level = 'dyad'").fetchone()
    assert skill[0] == 4 and skill[1] == 4 and skill[2] == pytest.approx(27 / 63)  # the monthly runs only
    pooled = scored.execute("SELECT n, mae FROM accuracy_by_horizon WHERE model = 'poisson_glm' AND "
                            "vintage = 'latest' AND level = 'dyad'").fetchone()
    assert pooled[0] == 4 and pooled[1] == pytest.approx(27 / 4)


def test_exceedances_list(scored) -> None:
    ex = scored.execute("SELECT * FROM exceedances ORDER BY model, vintage, rank").df()
    # Only glm's first release of QMB->XAB (40 > q950 = 20) exceeds; persistence's q950 is 40 (not exceeded).
    assert len(ex) == 1
    row = ex.iloc[0]
    assert (row["model"], row["vintage"], row["origin"], row["destination"]) == (
        "poisson_glm", "first_release", "QMB", "XAB")
    assert row["excess"] == pytest.approx(20) and row["rank"] == 1


def test_summary_table_and_text(scored) -> None:
    table = summary_table(scored)
    assert list(table["model"]) == ["persistence", "poisson_glm"]
    text = format_summary(table)
    assert "rel. WIS" in text and "poisson_glm" in text
    with pytest.raises(ValueError, match="vintage 'final'"):
        summary_table(scored, vintage="final")
    assert "no scored forecasts yet" in format_summary(table.iloc[:0])


def test_sql_table_matches_parquet_schema() -> None:
    con = new_warehouse()
    described = con.execute("DESCRIBE accuracy_rows").fetchall()
    assert [r[0] for r in described] == ACCURACY_SCHEMA.names
    duck_type = {"string": "VARCHAR", "timestamp[us]": "TIMESTAMP", "date32[day]": "DATE", "int16": "SMALLINT",
                 "int32": "INTEGER", "int64": "BIGINT", "double": "DOUBLE", "bool": "BOOLEAN"}
    assert [r[1] for r in described] == [duck_type[str(f.type)] for f in ACCURACY_SCHEMA]


def test_score_command(tmp_path: Path) -> None:
    ws = init_workspace(tmp_path / "ws")
    con = new_warehouse(str(ws.warehouse_path))
    _fill(con)
    con.close()
    runner = CliRunner()
    result = runner.invoke(main, ["score", "--workspace", str(ws.root)])
    assert result.exit_code == 0, result.output
    assert "36 new rows" in result.output  # 2 runs x 9 rows (4 dyads + 5 totals) x 2 vintages
    assert "poisson_glm" in result.output and "rel. WIS" in result.output
    assert len(list(ws.accuracy.glob("accuracy_*.parquet"))) == 1
    again = runner.invoke(main, ["score", "--workspace", str(ws.root), "--rebuild"])
    assert again.exit_code == 0, again.output
    assert "rebuilt" in again.output and "no new rows" in again.output
    assert len(list(ws.accuracy.glob("accuracy_*.parquet"))) == 1
