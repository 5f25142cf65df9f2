"""score_frame, the pure core: which rows get scored, against which vintage, with which values."""

from __future__ import annotations

import pandas as pd
import pytest
from _scoring_warehouse import forecast_frame

from dyadcast.scoring.schema import ACCURACY_COLUMNS
from dyadcast.scoring.score import ScoringInputError, score_frame

DYADS = [("QMA", "XAA"), ("QMA", "XAB"), ("QMB", "XAA"), ("QMB", "XAB")]


def _forecasts() -> pd.DataFrame:
    frame = forecast_frame(DYADS, "2025-01", horizon=1, mean=10.0)
    for col, value in {"run_id": "r1", "cutoff": pd.Timestamp("2025-01-01"), "model": "m", "run_kind": "monthly"}.items():
        frame[col] = value
    return frame


def _actuals(rows: list[tuple[str, str, int, int, str]]) -> pd.DataFrame:
    return pd.DataFrame([
        {"origin": o, "destination": d, "month": pd.Timestamp("2025-02-01"), "arrivals": a, "load_id": load,
         "published_on": pd.Timestamp(pub)} for o, d, a, load, pub in rows
    ])


def test_totals_wait_for_every_destination_they_span() -> None:
    # Only XAA reported for 2025-02: its two dyads and its destination total can be scored; origin totals
    # (each spans XAB too), XAB's total and the world total wait.
    acts = _actuals([("QMA", "XAA", 12, 5, "2025-03-10"), ("QMB", "XAA", 0, 5, "2025-03-10")])
    rows = score_frame(_forecasts(), acts, vintage="first_release")
    assert list(rows.columns) == list(ACCURACY_COLUMNS)
    got = sorted(zip(rows["level"], rows["origin"], rows["destination"], strict=True))
    assert got == [("destination_total", "*", "XAA"), ("dyad", "QMA", "XAA"), ("dyad", "QMB", "XAA")]
    assert rows.attrs["totals_incomplete"] == 4
    total = rows[rows["level"] == "destination_total"].iloc[0]
    assert total["actual"] == 12 and total["n_cells"] == 2 and total["mean"] == 20
    assert total["actual_vintage_key"] == "5@2025-03-10"


def test_complete_month_scores_every_level_with_combined_vintage() -> None:
    acts = _actuals([("QMA", "XAA", 12, 5, "2025-03-10"), ("QMB", "XAA", 0, 5, "2025-03-10"),
                     ("QMA", "XAB", 3, 6, "2025-03-12"), ("QMB", "XAB", 40, 6, "2025-03-12")])
    rows = score_frame(_forecasts(), acts, vintage="latest")
    assert rows.attrs["totals_incomplete"] == 0
    assert rows["level"].value_counts().to_dict() == {
        "dyad": 4, "origin_total": 2, "destination_total": 2, "world_total": 1}
    world = rows[rows["level"] == "world_total"].iloc[0]
    assert (world["origin"], world["destination"], world["actual"], world["n_cells"]) == ("*", "*", 55, 4)
    assert world["actual_vintage_key"] == "5@2025-03-10+6@2025-03-12"
    assert world["actual_load_id"] == 6 and world["actual_published_on"] == pd.Timestamp("2025-03-12")
    # Hand-computed values for dyad QMB->XAB: mean 10, 90 % interval [0, 20] (spread 0.5), actual 40.
    row = rows[(rows["origin"] == "QMB") & (rows["destination"] == "XAB")].iloc[0]
    assert (row["error"], row["abs_error"], row["sq_error"]) == (-30, 30, 900)
    assert bool(row["exceeded"]) and not bool(row["covered_90"]) and not bool(row["covered_50"])
    assert row["interval_score_90"] == pytest.approx(20 + 20 * 20)  # width 20 + (2 / 0.1) * (40 - 20)
    assert bool(row["predicted_positive"]) and bool(row["actual_positive"])
    assert pd.isna(row["naive_scale"]) and pd.isna(row["scaled_error"])
    assert rows["vintage"].eq("latest").all()


def test_naive_scales_feed_scaled_error() -> None:
    acts = _actuals([("QMA", "XAA", 12, 5, "2025-03-10"), ("QMB", "XAA", 0, 5, "2025-03-10")])
    scales = pd.DataFrame({"run_id": ["r1", "r1"], "level": ["dyad", "destination_total"],
                           "naive_scale": [4.0, 8.0]})
    rows = score_frame(_forecasts(), acts, vintage="latest", naive_scales=scales).set_index(["level", "origin"])
    assert rows.loc[("dyad", "QMA"), "scaled_error"] == pytest.approx(2 / 4)
    assert rows.loc[("destination_total", "*"), "scaled_error"] == pytest.approx(8 / 8)


def test_errors_name_what_is_wrong() -> None:
    acts = _actuals([("QMA", "XAA", 12, 5, "2025-03-10"), ("QMA", "XAA", 13, 5, "2025-03-10")])
    with pytest.raises(ScoringInputError, match=r"origin=QMA, destination=XAA, month=2025-02"):
        score_frame(_forecasts(), acts, vintage="latest")
    with pytest.raises(ScoringInputError, match=r"lacks column\(s\) \['q950'\]"):
        score_frame(_forecasts().drop(columns="q950"), acts.iloc[:1], vintage="latest")
    with pytest.raises(ScoringInputError, match="vintage 'final'"):
        score_frame(_forecasts(), acts.iloc[:1], vintage="final")
    bad = _forecasts().assign(level="region_total")
    with pytest.raises(ScoringInputError, match="unknown level"):
        score_frame(bad, acts.iloc[:1], vintage="latest")


def test_unlisted_dyad_of_a_reported_destination_is_an_implied_zero() -> None:
    # The flows contract: a vintage is complete for each (destination, month) it mentions.
    acts = _actuals([("QMA", "XAA", 12, 5, "2025-03-10")])
    rows = score_frame(_forecasts(), acts, vintage="latest").set_index(["level", "origin", "destination"])
    assert rows.loc[("dyad", "QMB", "XAA"), "actual"] == 0
    assert rows.loc[("dyad", "QMB", "XAA"), "actual_vintage_key"] == "5@2025-03-10"
    assert rows.loc[("destination_total", "*", "XAA"), "actual"] == 12


def test_a_destination_month_from_two_vintages_is_refused() -> None:
    acts = _actuals([("QMA", "XAA", 12, 5, "2025-03-10"), ("QMB", "XAA", 1, 6, "2025-03-11")])
    with pytest.raises(ScoringInputError, match=r"destination=XAA, month=2025-02 come from 2 vintages"):
        score_frame(_forecasts(), acts, vintage="latest")


def test_key_sets_equal_a_plain_per_group_join() -> None:
    import numpy as np

    from dyadcast.scoring.score import key_sets

    rng = np.random.default_rng(3)
    cells = pd.DataFrame({"g": rng.integers(0, 300, 5000),
                          "actual_vintage_key": [f"{k}@2025-01-{k % 28 + 1:02d}" for k in rng.integers(1, 9, 5000)]})
    got = key_sets(cells, ["g"]).set_index("g")["actual_vintage_key"].sort_index()
    want = cells.groupby("g")["actual_vintage_key"].agg(lambda s: "+".join(sorted(set(s))))
    pd.testing.assert_series_equal(got, want, check_names=False)
