"""score_pending on a tiny warehouse: what gets scored, exactly once, revisions, the log files, recovery."""

from __future__ import annotations

import importlib.util
from pathlib import Path

import duckdb
import pandas as pd
import pytest
from _scoring_warehouse import add_flows, add_run, count, forecast_frame, new_warehouse

from dyadcast.scoring import pending, read_accuracy_log, rebuild_accuracy_index, score_pending
from dyadcast.scoring.store import list_batches

ORIGINS, DESTINATIONS = ("QMA", "QMB"), ("XAA", "XAB")
DYADS = [(o, d) for o in ORIGINS for d in DESTINATIONS]
ROWS_PER_RUN_TARGET = 4 + 2 + 2 + 1  # dyads + origin totals + destination totals + world


def _history(con: duckdb.DuckDBPyConnection) -> None:
    """2024-07..2024-12, published 2025-01-10 (load 1): QMA->XAA 0,4,0,2,0,0, every other dyad 0."""
    rows = []
    for k, month in enumerate(pd.date_range("2024-07-01", periods=6, freq="MS").strftime("%Y-%m")):
        rows.append(("QMA", "XAA", month, [0, 4, 0, 2, 0, 0][k]))
        rows.append(("QMA", "XAB", month, 0))
        rows.append(("QMB", "XAA", month, 0))
        rows.append(("QMB", "XAB", month, 0))
    add_flows(con, 1, "2025-01-10", rows)


@pytest.fixture()
def wh(tmp_path: Path) -> tuple[duckdb.DuckDBPyConnection, Path]:
    con = new_warehouse()
    _history(con)
    add_run(con, "r-glm", "2024-12", "poisson_glm", "2025-01-10", forecast_frame(DYADS, "2024-12", 2, mean=10.0))
    add_run(con, "r-pers", "2024-12", "persistence", "2025-01-10", forecast_frame(DYADS, "2024-12", 2, mean=20.0))
    # 2025-01 first release (load 2): both destinations reported; QMB->XAA not listed = implied zero.
    add_flows(con, 2, "2025-02-10", [("QMA", "XAA", "2025-01", 12), ("QMA", "XAB", "2025-01", 3),
                                     ("QMB", "XAB", "2025-01", 40)])
    yield con, tmp_path / "accuracy"
    con.close()


def test_scores_once_per_vintage_and_never_twice(wh) -> None:
    con, acc = wh
    first = score_pending(con, acc)
    # 2 runs x 9 rows (target 2025-01; 2025-02 has no actuals) x 2 vintages
    assert first.rows_written == 2 * ROWS_PER_RUN_TARGET * 2
    assert first.rows_by_vintage == {"first_release": 18, "latest": 18}
    assert len(first.batches) == 1 and list_batches(acc) == first.batches
    assert count(con, "accuracy_rows") == 36
    log = read_accuracy_log(acc)
    assert len(log) == 36 and log["batch_id"].nunique() == 1

    again = score_pending(con, acc)
    assert again.rows_written == 0 and again.targets_checked == 0
    assert list_batches(acc) == first.batches and count(con, "accuracy_rows") == 36


def test_revision_adds_exactly_the_affected_latest_rows(wh) -> None:
    con, acc = wh
    score_pending(con, acc)
    # Load 3 restates destination XAB for 2025-01 (QMA->XAB 5; QMB->XAB not listed -> 0). Per run the affected
    # targets are XAB's 2 dyads, both origin totals (each spans XAB), XAB's total and the world total = 6.
    add_flows(con, 3, "2025-02-20", [("QMA", "XAB", "2025-01", 5)])
    revised = score_pending(con, acc)
    assert revised.rows_written == 2 * 6
    assert revised.rows_by_vintage == {"latest": 12}
    assert revised.rows_by_level == {"dyad": 4, "origin_total": 4, "destination_total": 2, "world_total": 2}
    assert count(con, "accuracy_rows", "vintage = 'first_release'") == 18
    assert len(list_batches(acc)) == 2
    # The views keep one row per key and vintage: the newest 'latest' row.
    assert count(con, "accuracy_current") == 36
    current = con.execute(
        "SELECT actual FROM accuracy_current WHERE vintage = 'latest' AND model = 'poisson_glm' "
        "AND level = 'world_total'").fetchall()
    assert current == [(17.0,)]  # 12 + 0 + 5 + 0
    assert score_pending(con, acc).rows_written == 0


def test_totals_scored_once_every_destination_reports(wh) -> None:
    con, acc = wh
    score_pending(con, acc)
    add_flows(con, 4, "2025-03-10", [("QMA", "XAA", "2025-02", 7)])  # only XAA reports 2025-02
    partial = score_pending(con, acc)
    assert partial.rows_written == 2 * 2 * 3  # runs x vintages x (2 dyads + XAA total)
    assert partial.totals_incomplete == 2 * 2 * 4
    add_flows(con, 5, "2025-03-12", [("QMB", "XAB", "2025-02", 9)])  # XAB reports: the rest can be scored
    rest = score_pending(con, acc)
    assert rest.rows_written == 2 * 2 * 6
    assert rest.totals_incomplete == 0
    world = con.execute("SELECT DISTINCT actual, actual_vintage_key FROM accuracy_rows WHERE level = 'world_total'"
                        " AND target_month = DATE '2025-02-01'").fetchall()
    assert world == [(16.0, "4@2025-03-10+5@2025-03-12")]


def test_mase_scale_uses_history_as_published_at_as_of(wh) -> None:
    con, acc = wh
    # A later load (after the runs' as-of date) restates 2024-10: the runs could not have seen it.
    add_flows(con, 9, "2025-02-01", [("QMA", "XAA", "2024-10", 500)])
    score_pending(con, acc)
    scales = dict(con.execute(
        "SELECT level, naive_scale FROM run_naive_scales WHERE run_id = 'r-glm'").fetchall())
    # dyads: QMA->XAA |diffs| 4, 4, 2, 2, 0 and three all-zero dyads: 12 / 20 pairs (hand-computed)
    assert scales["dyad"] == pytest.approx(12 / 20)
    assert scales["world_total"] == pytest.approx(12 / 5)
    row = con.execute("SELECT abs_error, scaled_error FROM accuracy_rows WHERE run_id = 'r-glm' AND level = 'dyad'"
                      " AND origin = 'QMA' AND destination = 'XAA' AND vintage = 'latest'").fetchone()
    assert row[1] == pytest.approx(row[0] / 0.6)


def test_rebuild_index_restores_the_table_from_parquet(wh) -> None:
    con, acc = wh
    score_pending(con, acc)
    add_flows(con, 3, "2025-02-20", [("QMA", "XAB", "2025-01", 5)])
    score_pending(con, acc)
    before = con.execute("SELECT * FROM accuracy_rows ORDER BY ALL").df()
    con.execute("DELETE FROM accuracy_rows")
    assert rebuild_accuracy_index(con, acc) == len(before) == 48
    after = con.execute("SELECT * FROM accuracy_rows ORDER BY ALL").df()
    pd.testing.assert_frame_equal(before, after)
    assert score_pending(con, acc).rows_written == 0  # checks were cleared, but nothing is written twice


def test_crash_before_commit_leaves_nothing(wh, monkeypatch: pytest.MonkeyPatch) -> None:
    con, acc = wh

    def crash(tmp: Path, final: Path) -> None:
        raise OSError("disk full (simulated)")

    monkeypatch.setattr(pending, "publish", crash)
    with pytest.raises(OSError, match="simulated"):
        score_pending(con, acc)
    assert count(con, "accuracy_rows") == 0 and count(con, "scoring_checks") == 0
    assert list(acc.iterdir()) == []  # temporary file removed, nothing published
    monkeypatch.undo()
    assert score_pending(con, acc).rows_written == 36


@pytest.mark.parametrize("failing", ["write_temporary", "insert_rows"])
def test_failure_while_the_batch_is_written_and_inserted_leaves_nothing(
    wh, monkeypatch: pytest.MonkeyPatch, failing: str
) -> None:
    # The Parquet file is written on a second thread while the rows are inserted: whichever of the two fails,
    # the transaction rolls back, the other is waited for, and no file (temporary or published) remains.
    con, acc = wh

    def fail(*_args: object) -> None:
        raise OSError(f"{failing} failed (simulated)")

    monkeypatch.setattr(pending, failing, fail)
    with pytest.raises(OSError, match="simulated"):
        score_pending(con, acc)
    assert count(con, "accuracy_rows") == 0 and count(con, "scoring_checks") == 0
    assert list(acc.iterdir()) == []
    monkeypatch.undo()
    assert score_pending(con, acc).rows_written == 36


def test_crash_after_rename_is_recovered_without_rescoring(wh) -> None:
    con, acc = wh
    first = score_pending(con, acc)
    # Simulate a crash between the rename and COMMIT: the file exists, its rows and checks do not.
    con.execute("DELETE FROM accuracy_rows")
    con.execute("DELETE FROM scoring_checks")
    again = score_pending(con, acc)
    assert again.recovered_batches == first.batches
    assert again.rows_written == 0
    assert count(con, "accuracy_rows") == 36 and list_batches(acc) == first.batches


@pytest.mark.skipif(importlib.util.find_spec("s3fs") is not None, reason="s3fs is installed: no missing backend")
def test_object_store_without_its_backend_says_what_to_install(wh) -> None:
    con, _ = wh
    with pytest.raises(ValueError, match=r"Install s3fs .*pip install"):
        score_pending(con, "s3://bucket/accuracy")
