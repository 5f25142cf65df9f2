"""The analyst views of sql/6*: documented, usable from a plain DuckDB client anywhere, and right."""

from __future__ import annotations

import re
from datetime import date

import duckdb
import pandas as pd
import pytest
from report_warehouse import counted_rows, newest_scoring

from dyadcast.warehouse import sql_dir

VIEWS = ["forecasts_all", "forecasts_latest", "accuracy_log", "accuracy_overview", "data_freshness",
         "quarantined_files", "actuals_totals"]
FILES = sorted(sql_dir().glob("6*.sql"))


def test_one_view_per_file_with_every_column_documented() -> None:
    """Each file holds one view and its header comment names each of the view's columns."""
    con = duckdb.connect()
    from dyadcast.warehouse import apply_sql

    apply_sql(con)
    assert len(FILES) >= len(VIEWS)
    for path in FILES:
        text = path.read_text(encoding="utf-8")
        created = re.findall(r"CREATE OR REPLACE VIEW (\w+)", text)
        assert len(created) == 1, f"{path.name}: one view per file"
        header = "\n".join(line for line in text.splitlines() if line.startswith("--"))
        columns = [r[0] for r in con.execute(f"DESCRIBE {created[0]}").fetchall()]
        missing = [c for c in columns if not re.search(rf"\b{c}\b", header)]
        assert not missing, f"{path.name}: columns {missing} are not described in the header"
    con.close()


def test_views_work_from_a_plain_client_in_another_folder(fixture_wh, tmp_path, monkeypatch) -> None:
    monkeypatch.chdir(tmp_path)
    con = duckdb.connect(fixture_wh.path, read_only=True)
    try:
        for view in VIEWS:
            assert con.execute(f"SELECT count(*) FROM {view}").fetchone()[0] > 0, view
    finally:
        con.close()


def test_forecasts_all_flags_the_newest_run(ro, fixture_wh) -> None:
    frame = ro.execute("SELECT run_id, is_latest_run, run_rank FROM forecasts_all WHERE cutoff = DATE '2025-01-01' "
                       "AND model = 'poisson_glm' AND level = 'world_total' AND horizon = 1").fetchdf()
    flags = dict(zip(frame.run_id, frame.is_latest_run, strict=True))
    assert flags == {"202501-poisson_glm-b": True, "202501-poisson_glm-a": False}
    assert ro.execute("SELECT count(*) FROM forecasts_all").fetchone()[0] == len(fixture_wh.forecasts)


def test_forecasts_latest_keeps_newest_cutoff_then_newest_run(ro, fixture_wh) -> None:
    fc = fixture_wh.forecasts
    keys = ["model", "level", "origin", "destination", "target_month"]
    expected = (fc.sort_values(["cutoff", "created_at", "run_id"])
                .drop_duplicates(keys, keep="last")[[*keys, "run_id"]])
    got = ro.execute(f"SELECT {', '.join(keys)}, run_id FROM forecasts_latest").fetchdf()
    merged = expected.assign(target_month=pd.to_datetime(expected.target_month)).merge(
        got.assign(target_month=pd.to_datetime(got.target_month)), on=keys, suffixes=("_expected", "_view"))
    assert len(merged) == len(expected) == len(got)
    assert (merged.run_id_expected == merged.run_id_view).all()
    # a target three months out is covered only by the newest cutoff: the world total for 2025-06
    row = got[(got.model == "poisson_glm") & (got.level == "world_total")
              & (pd.to_datetime(got.target_month) == pd.Timestamp("2025-06-01"))]
    assert row.run_id.tolist() == ["202503-poisson_glm-a"]


def test_accuracy_log_flags(ro, fixture_wh) -> None:
    log = ro.execute("SELECT * FROM accuracy_log").fetchdf()
    assert len(log) == len(fixture_wh.accuracy), "every row of accuracy_rows, nothing dropped"
    current = newest_scoring(fixture_wh.accuracy)
    assert log.is_current.sum() == len(current)
    revised = log[(log.vintage == "latest") & ~log.is_current]
    assert len(revised) > 0 and (pd.to_datetime(revised.target_month).dt.month.isin([12, 1])).all()
    # the rerun at 2025-01 replaces the first run; the monthly run at 2024-06 stands, not the later backtest
    runs = log.drop_duplicates("run_id").set_index("run_id")
    assert runs.loc["202501-poisson_glm-b", "is_reference_run"] and not runs.loc["202501-poisson_glm-a",
                                                                                "is_reference_run"]
    assert runs.loc["202406-poisson_glm-a", "is_reference_run"]
    assert runs.loc["202406-poisson_glm-bt", "is_latest_run"] and not runs.loc["202406-poisson_glm-bt",
                                                                                "is_reference_run"]
    outside = log[log.beyond_90 > 0]
    assert ((outside.actual > outside.q950) | (outside.actual < outside.q050)).all()


def test_accuracy_overview_matches_a_direct_computation(ro, fixture_wh) -> None:
    rows = counted_rows(fixture_wh.accuracy)
    rows = rows[(rows.level == "dyad") & (rows.vintage == "latest")]
    expected = rows.groupby(["model", "cutoff", "horizon"]).agg(
        n=("wis", "size"), mean_wis=("wis", "mean"), mae=("abs_error", "mean"),
        coverage_90=("covered_90", "mean"), run_kind=("run_kind", "first")).reset_index()
    got = ro.execute("SELECT model, cutoff, horizon, n, mean_wis, mae, coverage_90, run_kind FROM accuracy_overview "
                     "WHERE level = 'dyad' AND vintage = 'latest'").fetchdf()
    expected["cutoff"] = pd.to_datetime(expected["cutoff"])
    got["cutoff"] = pd.to_datetime(got["cutoff"])
    merged = expected.merge(got, on=["model", "cutoff", "horizon"], suffixes=("", "_view"))
    assert len(merged) == len(expected) == len(got)
    assert (merged.n == merged.n_view).all() and (merged.run_kind == merged.run_kind_view).all()
    for column in ("mean_wis", "mae", "coverage_90"):
        assert merged[column].to_numpy() == pytest.approx(merged[f"{column}_view"].to_numpy(), rel=1e-12)


def test_actuals_totals_sum_the_latest_revision(ro, fixture_wh) -> None:
    month = date(2025, 1, 1)  # revised for XAA, so first release and latest differ
    latest = fixture_wh.latest
    first = fixture_wh.first_release
    got = dict(ro.execute("SELECT vintage, arrivals FROM actuals_totals WHERE level = 'world_total' AND month = ?",
                          [month]).fetchall())
    assert got["latest"] == latest[latest.month == month].arrivals.sum()
    assert got["first_release"] == first[first.month == month].arrivals.sum()
    assert got["latest"] != got["first_release"]


def test_data_freshness_and_quarantine(ro) -> None:
    fresh = ro.execute("SELECT kind, latest_period, files_loaded, files_rejected FROM data_freshness").fetchall()
    assert fresh == [
        ("flows", date(2025, 3, 1), 29, 1),  # 27 monthly files and 2 revisions
        ("origin_indicators", date(2025, 3, 1), 1, 0),
        ("destination_indicators", date(2025, 2, 1), 1, 0),
        ("signals", date(2025, 3, 31), 1, 0),
        ("dyad_attributes", None, 0, 0),
    ]
    quarantined = ro.execute("SELECT file_name, reason FROM quarantined_files").fetchall()
    assert quarantined == [("flows_2025-04-10.csv", "column 'arivals' is not expected; did you mean 'arrivals'?")]
