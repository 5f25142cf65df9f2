"""Each example query of sql/queries/ runs on the fixture warehouse and returns the rows computed
independently, in pandas, from the frames the fixture inserted."""

from __future__ import annotations

import pandas as pd
import pytest
from report_warehouse import counted_rows

from dyadcast.warehouse import read_sql

QUERIES = ["forecast_changes_for_target.sql", "accuracy_last_12_cutoffs.sql", "largest_misses.sql",
           "coverage_by_destination.sql"]


def run(con, name: str, replace: tuple[str, str] | None = None) -> pd.DataFrame:  # noqa: ANN001
    text = read_sql(f"queries/{name}")
    if replace:
        assert replace[0] in text
        text = text.replace(*replace)
    return con.execute(text).fetchdf()


def latest_dyads(fixture_wh) -> pd.DataFrame:  # noqa: ANN001
    rows = counted_rows(fixture_wh.accuracy)
    return rows[(rows.level == "dyad") & (rows.vintage == "latest")]


def test_every_query_is_documented() -> None:
    for name in QUERIES:
        text = read_sql(f"queries/{name}")
        assert text.startswith("-- ") and "Run: dyadcast sql --file sql/queries/" + name in text


@pytest.mark.parametrize("target, revised", [(None, False), ("2025-01-01", True)])
def test_forecast_changes_for_target(ro, fixture_wh, target, revised) -> None:
    swap = ("(SELECT max(month) FROM actuals_latest)", f"DATE '{target}'") if target else None
    got = run(ro, "forecast_changes_for_target.sql", swap)
    month = pd.Timestamp(target or "2025-03-01").date()  # default: the newest reported month
    fc = fixture_wh.forecasts
    runs = fixture_wh.runs.sort_values("created_at").drop_duplicates(["cutoff", "model", "run_kind"], keep="last")
    want = fc[(fc.model == "poisson_glm") & (fc.level == "world_total") & (fc.target_month == month)
              & fc.run_id.isin(runs.run_id)].sort_values(["cutoff", "run_kind"])
    assert got.run_id.tolist() == want.run_id.tolist() and got.horizon.tolist() == want.horizon.tolist()
    assert got["median"].to_numpy() == pytest.approx(want.q500.round(1).to_numpy())
    assert got["q950"].to_numpy() == pytest.approx(want.q950.round(1).to_numpy())
    first = fixture_wh.first_release
    latest = fixture_wh.latest
    assert (got.actual_first_release == first[first.month == month].arrivals.sum()).all()
    assert (got.actual_latest == latest[latest.month == month].arrivals.sum()).all()
    assert (got.actual_first_release != got.actual_latest).all() == revised


def test_accuracy_last_12_cutoffs(ro, fixture_wh) -> None:
    got = run(ro, "accuracy_last_12_cutoffs.sql")
    rows = latest_dyads(fixture_wh)
    recent = sorted(rows.cutoff.unique())[-12:]
    rows = rows[rows.cutoff.isin(recent)]
    want = rows.groupby(["model", "horizon"]).agg(
        cutoffs=("cutoff", "nunique"), n=("wis", "size"), mae=("abs_error", "mean"), mean_wis=("wis", "mean"),
        rmse=("sq_error", lambda s: s.mean() ** 0.5), coverage_90=("covered_90", "mean"), bias=("error", "mean"),
    ).reset_index()
    merged = want.merge(got, on=["model", "horizon"], suffixes=("", "_q"))
    assert len(merged) == len(want) == len(got) == 9
    assert (merged.cutoffs == merged.cutoffs_q).all() and (merged.n == merged.n_q).all()
    for column in ("mae", "mean_wis", "rmse", "coverage_90", "bias"):
        assert merged[f"{column}_q"].to_numpy() == pytest.approx(merged[column].to_numpy(), abs=6e-4), column
    # ordered by horizon, then best (lowest) mean WIS first
    assert got.groupby("horizon")["mean_wis"].apply(lambda s: s.is_monotonic_increasing).all()
    assert str(min(got.first_cutoff))[:7] == str(recent[0])[:7]


def test_largest_misses(ro, fixture_wh) -> None:
    got = run(ro, "largest_misses.sql")
    rows = latest_dyads(fixture_wh).sort_values(
        ["abs_error", "target_month", "model", "origin", "destination", "horizon"],
        ascending=[False, False, True, True, True, True]).head(20)
    assert len(got) == 20
    assert got.abs_error.to_numpy() == pytest.approx(rows.abs_error.round(1).to_numpy())
    assert list(zip(got.model, got.origin, got.destination, got.horizon, strict=True)) == list(
        zip(rows.model, rows.origin, rows.destination, rows.horizon, strict=True))
    assert (got.covered_90 == rows.covered_90.to_numpy()).all()


def test_coverage_by_destination(ro, fixture_wh) -> None:
    got = run(ro, "coverage_by_destination.sql")
    rows = latest_dyads(fixture_wh)
    want = rows.groupby(["model", "destination"]).agg(
        n=("wis", "size"), coverage_50=("covered_50", "mean"), coverage_90=("covered_90", "mean"),
        above_range=("exceeded", "sum")).reset_index()
    merged = want.merge(got, on=["model", "destination"], suffixes=("", "_q"))
    assert len(merged) == len(want) == len(got) == 12
    assert (merged.n == merged.n_q).all() and (merged.above_range == merged.above_range_q).all()
    assert merged.coverage_90_q.to_numpy() == pytest.approx(merged.coverage_90.round(3).to_numpy())
    assert merged.coverage_50_q.to_numpy() == pytest.approx(merged.coverage_50.round(3).to_numpy())
