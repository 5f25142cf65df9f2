"""The accuracy summaries (sql/06, sql/50_*): whether refreshed batch by batch, after a revision, after a batch
left the log, or not refreshed at all (read live), the views give the rows and numbers of their full-log
definitions (full_log_views.py), and the report page built from them does not depend on when they were
refreshed."""

from __future__ import annotations

import re
import shutil
from pathlib import Path

import duckdb
import pandas as pd
import pytest
from conftest import workspace_with
from full_log_views import FULL_LOG
from report_warehouse import Fixture

from dyadcast.report import build_report, queries
from dyadcast.report.summaries import _bytes, refresh_summaries

# The key of each view's rows (unique), to set both results in the same order.
KEYS = {
    "accuracy_summary": ["model", "run_kind", "horizon", "cutoff", "vintage", "level"],
    "skill_vs_persistence": ["model", "horizon", "vintage", "level"],
    "exceedances": ["model", "run_kind", "cutoff", "vintage", "origin", "destination", "target_month"],
    "accuracy_by_horizon": ["model", "horizon", "vintage", "level"],
    "accuracy_overview": ["model", "cutoff", "horizon", "vintage", "level"],
}
# The fixture's first scoring, split by target month into three batches, then the revision.
RELABEL = """
    UPDATE held_rows SET batch_id = CASE
        WHEN batch_id = 'fixture-latest-1' THEN 'b4'
        WHEN target_month <= DATE '2024-06-01' THEN 'b1'
        WHEN target_month <= DATE '2024-12-01' THEN 'b2'
        ELSE 'b3' END
"""


@pytest.fixture(scope="module")
def staged(tmp_path_factory: pytest.TempPathFactory, fixture_wh: Fixture) -> Path:
    """The fixture warehouse with its accuracy rows moved to `held_rows`, relabelled as batches b1-b4."""
    path = tmp_path_factory.mktemp("staged") / "warehouse.duckdb"
    shutil.copy(fixture_wh.path, path)
    con = duckdb.connect(str(path))
    con.execute("CREATE TABLE held_rows AS SELECT * FROM accuracy_rows")
    con.execute(RELABEL)
    con.execute("DELETE FROM accuracy_rows")
    con.close()
    return path


@pytest.fixture
def wh(staged: Path, tmp_path: Path):  # noqa: ANN201 - a DuckDB connection
    path = tmp_path / "warehouse.duckdb"
    shutil.copy(staged, path)
    con = duckdb.connect(str(path))
    yield con
    con.close()


def add_batch(con: duckdb.DuckDBPyConnection, batch_id: str) -> None:
    con.execute("INSERT INTO accuracy_rows SELECT * FROM held_rows WHERE batch_id = ?", [batch_id])


def assert_views_match_full_log(con: duckdb.DuckDBPyConnection) -> None:
    for name, sql in FULL_LOG.items():
        got = con.execute(f"SELECT * FROM {name}").df()
        want = con.execute(sql).df()
        assert list(got.columns) == list(want.columns), name
        assert len(got) == len(want), name
        got, want = (f.sort_values(KEYS[name]).reset_index(drop=True) for f in (got, want))
        # sums are added in another order than the full-log averages: equal to about 1e-13, not bit for bit
        pd.testing.assert_frame_equal(got, want, check_exact=False, rtol=1e-9, obj=name)


def stale(con: duckdb.DuckDBPyConnection) -> bool:
    return bool(con.execute("SELECT stale FROM accuracy_summary_status").fetchone()[0])


def test_refreshed_batch_by_batch_including_a_revision(wh) -> None:
    for batch in ("b1", "b2", "b3", "b4"):
        add_batch(wh, batch)
        assert stale(wh)
        result = refresh_summaries(wh)
        assert (result.state, result.new_batches, result.gone_batches) == ("refreshed", 1, 0)
        assert not stale(wh)
        assert wh.execute("SELECT count(*) FROM accuracy_recompute_groups").fetchone()[0] == 0
        assert_views_match_full_log(wh)
    assert refresh_summaries(wh).state == "current"
    # the revision (b4) supersedes 'latest' rows of two target months: the summaries count the new actuals
    revised = wh.execute("SELECT count(*) FROM held_rows WHERE batch_id = 'b4'").fetchone()[0]
    assert revised > 0
    latest = wh.execute("SELECT sum(n) FROM accuracy_group_stats WHERE vintage = 'latest'").fetchone()[0]
    first = wh.execute("SELECT sum(n) FROM accuracy_group_stats WHERE vintage = 'first_release'").fetchone()[0]
    assert latest == first, "a revision replaces rows; it never adds targets"


def test_views_read_live_what_is_not_summarised_yet(wh) -> None:
    for batch in ("b1", "b2", "b3"):
        add_batch(wh, batch)
    refresh_summaries(wh)
    add_batch(wh, "b4")
    assert stale(wh)
    assert wh.execute("SELECT count(*) FROM accuracy_recompute_groups").fetchone()[0] > 0
    assert_views_match_full_log(wh)
    assert wh.execute("SELECT count(*) FROM accuracy_group_stats").fetchone()[0] > 0, "nothing stored by a read"


def test_live_rows_are_the_current_rows_of_the_groups_not_summarised(wh) -> None:
    """accuracy_recompute_rows, the live part every summary view shares, holds exactly the rows that the
    full-log view accuracy_log flags is_current in the groups being recomputed, revised ones included."""
    for batch in ("b1", "b2", "b3"):
        add_batch(wh, batch)
    refresh_summaries(wh)
    add_batch(wh, "b4")
    in_groups = ("FROM accuracy_log AS l SEMI JOIN accuracy_recompute_groups AS g ON g.run_id = l.run_id "
                 "AND g.target_month = l.target_month AND g.vintage = l.vintage")
    assert wh.execute(f"SELECT count(*) {in_groups} WHERE NOT l.is_current").fetchone()[0] > 0, "a revision"
    columns = "run_id, level, origin, destination, target_month, vintage, horizon, actual, mean, wis, scaled_error"
    key = ["run_id", "level", "origin", "destination", "target_month", "vintage"]
    got = wh.execute(f"SELECT {columns} FROM accuracy_recompute_rows").df().sort_values(key, ignore_index=True)
    want = wh.execute(f"SELECT {columns} {in_groups} WHERE l.is_current").df().sort_values(key, ignore_index=True)
    assert len(got) > 0
    pd.testing.assert_frame_equal(got, want)
    refresh_summaries(wh)
    assert wh.execute("SELECT count(*) FROM accuracy_recompute_rows").fetchone()[0] == 0


def test_a_batch_that_leaves_the_log_makes_every_group_recomputed(wh) -> None:
    for batch in ("b1", "b2", "b3", "b4"):
        add_batch(wh, batch)
    refresh_summaries(wh)
    wh.execute("DELETE FROM accuracy_rows WHERE batch_id = 'b2'")
    assert stale(wh)
    assert_views_match_full_log(wh)  # live
    result = refresh_summaries(wh)
    assert (result.new_batches, result.gone_batches) == (0, 1)
    assert_views_match_full_log(wh)
    wh.execute("DELETE FROM accuracy_rows")
    refresh_summaries(wh)
    assert wh.execute("SELECT count(*) FROM accuracy_group_stats").fetchone()[0] == 0
    assert wh.execute("SELECT count(*) FROM accuracy_summary").fetchone()[0] == 0


def test_read_only_connection_reads_live_and_stores_nothing(staged: Path, tmp_path: Path) -> None:
    path = tmp_path / "warehouse.duckdb"
    shutil.copy(staged, path)
    con = duckdb.connect(str(path))
    for batch in ("b1", "b2", "b3"):
        add_batch(con, batch)
    refresh_summaries(con)
    add_batch(con, "b4")
    con.close()
    ro = duckdb.connect(str(path), read_only=True)
    try:
        assert refresh_summaries(ro).state == "read-only"
        assert_views_match_full_log(ro)
    finally:
        ro.close()


def test_refresh_puts_the_memory_limit_back(wh) -> None:
    setting = "SELECT current_setting('memory_limit')"
    for limit in (None, "3GB"):
        if limit:
            wh.execute(f"SET memory_limit = '{limit}'")
        before = wh.execute(setting).fetchone()[0]
        add_batch(wh, "b1" if limit is None else "b2")
        assert refresh_summaries(wh).state == "refreshed"
        after = wh.execute(setting).fetchone()[0]
        assert abs(_bytes(after) - _bytes(before)) <= 0.11 * 2**30, (before, after)  # shown to 0.1 GiB
    assert _bytes("572.2 MiB") == pytest.approx(572.2 * 2**20) and _bytes("1.5 GiB") == 1.5 * 2**30
    assert _bytes("unlimited") is None


def test_report_does_not_depend_on_when_summaries_were_refreshed(staged: Path, fixture_wh: Fixture,
                                                                 tmp_path: Path) -> None:
    """The page from summaries refreshed month by month (the revision last, by the report itself) equals the
    page built live on a read-only copy of the same log."""
    incremental = workspace_with(tmp_path / "inc", str(staged))
    con = duckdb.connect(str(incremental.warehouse_path))
    try:
        for batch in ("b1", "b2", "b3"):
            add_batch(con, batch)
            refresh_summaries(con)
        add_batch(con, "b4")
        first = build_report(con, incremental).read_text(encoding="utf-8")
        assert not stale(con), "the report build refreshed the summaries"
        again = build_report(con, incremental).read_text(encoding="utf-8")
    finally:
        con.close()
    live = workspace_with(tmp_path / "live", fixture_wh.path)
    ro = duckdb.connect(fixture_wh.path, read_only=True)
    try:
        reference = build_report(ro, live).read_text(encoding="utf-8")
    finally:
        ro.close()
    built = re.compile(r"built \d{4}-\d\d-\d\d \d\d:\d\d UTC")
    assert built.sub("", first) == built.sub("", reference) == built.sub("", again)


def test_surprises_are_those_of_the_full_log(ro) -> None:
    """The report's surprises come from the few rows kept per run and target month; the full-log view
    accuracy_log gives the same ones (ties broken alike: newer target month, dyad, newer cutoff)."""
    for model in ("poisson_glm", "tweedie_gbm", "persistence"):
        got = queries.surprises(ro, model)
        want = ro.execute(
            "SELECT cutoff, horizon, origin, destination, target_month, actual, q050, q500, q950, beyond_90 "
            "FROM accuracy_log WHERE model = ? AND level = 'dyad' AND vintage = 'latest' AND is_reference_run "
            "AND is_current AND beyond_90 > 0 ORDER BY beyond_90 DESC, target_month DESC, origin, destination, "
            "cutoff DESC LIMIT 10", [model]).df()
        assert len(want) == 10, "the fixture has enough misses to fill the table"
        pd.testing.assert_frame_equal(got.reset_index(drop=True), want, check_dtype=False)
    with pytest.raises(ValueError, match="above the 20 rows"):
        queries.surprises(ro, "poisson_glm", limit=21)


def test_exceedances_are_those_of_the_full_log(ro) -> None:
    """Newest target months first, one row per dyad and month (a monthly run over a backtest), from the full-log
    definition of the view exceedances."""
    for model in ("poisson_glm", "tweedie_gbm"):
        for limit in (5, 15, 1000):
            got = queries.exceedances(ro, model, limit=limit)
            rows = ro.execute(f"SELECT * FROM ({FULL_LOG['exceedances']}) WHERE model = ? AND vintage = 'latest'",
                              [model]).df()
            rows = rows.assign(monthly=rows["run_kind"].eq("monthly"))
            rows = rows.sort_values(["monthly", "run_id"], ascending=False).drop_duplicates(
                ["target_month", "origin", "destination"])
            want = rows.sort_values(["target_month", "excess", "origin", "destination"],
                                    ascending=[False, False, True, True]).head(limit)
            assert len(got) == min(limit, len(rows)) > 0
            columns = ["target_month", "origin", "destination", "run_id", "actual", "q500", "q950", "excess"]
            pd.testing.assert_frame_equal(got[columns].reset_index(drop=True),
                                          want[columns].reset_index(drop=True), check_dtype=False)
