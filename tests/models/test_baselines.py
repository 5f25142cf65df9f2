"""Persistence, seasonal persistence and rolling mean: point forecasts and their learned error spread."""

from __future__ import annotations

import json
import time

import numpy as np
import pandas as pd
import pytest
from conftest import simulate

from dyadcast.models.base import forecast_columns
from dyadcast.models.baselines import (
    BUCKET_EDGES,
    Persistence,
    ResidualQuantiles,
    RollingMean,
    SeasonalPersistence,
    last_observed,
    sampled_positions,
)
from dyadcast.models.design import horizon_rows, subsample
from dyadcast.models.registry import make_model

LEVELS = (0.05, 0.25, 0.5, 0.75, 0.95)


@pytest.fixture(scope="module")
def sim():
    return simulate(n_origins=6, n_destinations=10, n_months=36, horizon=3, missing_share=0.02, seed=1)


def test_persistence_is_the_last_observed_month_for_every_horizon(sim) -> None:
    model = Persistence(horizon=3).fit(sim.frame)
    out = model.predict(sim.rows)
    assert list(out.columns) == forecast_columns(LEVELS) and len(out) == 3 * len(sim.rows)
    expected = sim.rows["lag_1"]
    for k in range(2, 13):  # lag_1 missing (a destination-month absent from every load): latest earlier month
        expected = expected.fillna(sim.rows[f"lag_{k}"])
    expected = expected.fillna(0.0).to_numpy()
    assert sim.rows["lag_1"].isna().any()  # the fixture really exercises the fallback
    for h in (1, 2, 3):
        assert np.array_equal(out.loc[out["horizon"] == h, "mean"].to_numpy(), expected)
    frame = pd.DataFrame({"lag_1": [np.nan, np.nan, 4.0], "lag_2": [np.nan, 2.0, 1.0]})
    assert last_observed(frame).tolist() == [0.0, 2.0, 4.0]


def test_seasonal_persistence_uses_the_same_calendar_month_last_year(sim) -> None:
    model = SeasonalPersistence(horizon=3).fit(sim.frame)
    out = model.predict(sim.rows)
    # Independent lookup: arrivals in month t+h-12 are lag_1 of the dyad's row at anchor month t+h-12.
    by_anchor = sim.frame.set_index(["origin", "destination", "month"])["lag_1"]
    for h in (1, 3):
        part = out[out["horizon"] == h]
        back = pd.to_datetime(part["target_month"]) - pd.DateOffset(months=12)
        keys = pd.MultiIndex.from_arrays([part["origin"], part["destination"], back])
        expected = by_anchor.reindex(keys).to_numpy()
        known = ~np.isnan(expected)
        assert known.mean() > 0.9
        assert np.allclose(part["mean"].to_numpy()[known], expected[known])
        fallback = last_observed(sim.rows)[~known]  # missing month last year: persistence instead
        assert np.allclose(part["mean"].to_numpy()[~known], fallback)


def test_rolling_mean_window_and_missing_months() -> None:
    frame = pd.DataFrame({
        "origin": ["XAA"] * 3, "destination": ["QMA"] * 3, "month": pd.to_datetime(["2024-01-01"] * 3),
        "lag_1": [3.0, np.nan, np.nan], "lag_2": [6.0, 4.0, np.nan], "lag_3": [9.0, np.nan, np.nan],
        "lag_4": [2.0, 1.0, np.nan], "lag_5": [5.0, 1.0, 7.0], "roll_mean_3": [6.0, np.nan, np.nan],
    })
    assert RollingMean(window=3).point(frame, 1).tolist() == [6.0, 4.0, 7.0]  # all-NaN window: persistence
    assert RollingMean(window=5).point(frame, 1).tolist() == [5.0, 2.0, 7.0]  # no roll_mean_5 column: lags
    with pytest.raises(ValueError, match="window=13"):
        RollingMean(window=13)


def test_zero_forecast_keeps_an_honest_chance_of_arrivals(sim) -> None:
    model = Persistence(horizon=2).fit(sim.frame)
    rows = horizon_rows(sim.frame, 2)
    zero_point = last_observed(rows) == 0
    positives = (rows.loc[zero_point, "target_2"] > 0).sum()
    expected = (positives + 0.5) / (zero_point.sum() + 1)  # the documented smoothing
    out = model.predict(sim.rows)
    zero_rows = out[(out["horizon"] == 2) & (out["mean"] == 0)]
    assert len(zero_rows) > 0 and 0.05 < expected < 0.95
    assert np.allclose(zero_rows["p_positive"], expected)
    assert (zero_rows["q950"] > 0).all()  # more than 5 % of such rows had arrivals, so the upper end is > 0


def test_learned_quantiles_are_calibrated_within_each_size_bucket() -> None:
    sim = simulate(n_origins=10, n_destinations=20, n_months=48, horizon=1, level=2.0, seed=4)
    model = Persistence(horizon=1).fit(sim.frame)
    rows = horizon_rows(sim.frame, 1)
    point = model.point(rows, 1)
    q, _ = model.residual_[1].predict(point)
    y = rows["target_1"].to_numpy()
    bucket = np.searchsorted(BUCKET_EDGES, point, side="left")
    checked = 0
    for b in np.unique(bucket):
        sel = bucket == b
        if sel.sum() < 300:
            continue
        checked += 1
        for j, level in enumerate(LEVELS):
            # definition of a quantile of the (discrete) training errors: P(Y < q) <= level <= P(Y <= q)
            tol = 1e-9 * np.maximum(q[sel, j], 1)
            below, at_or_below = (y[sel] < q[sel, j] - tol).mean(), (y[sel] <= q[sel, j] + tol).mean()
            assert below <= level <= at_or_below, (b, level, below, at_or_below)
    assert checked >= 4


def test_fitted_state_is_json_and_fit_is_fast() -> None:
    sim = simulate(n_origins=12, n_destinations=30, n_months=60, horizon=6, seed=2)  # 360 dyads x 60 months
    for name in ("persistence", "seasonal_persistence", "rolling_mean"):
        model = make_model(name, horizon=6, quantiles=LEVELS)
        start = time.perf_counter()
        out = model.fit(sim.frame).predict(sim.rows)
        elapsed = time.perf_counter() - start
        assert elapsed < 5.0, (name, elapsed)  # measured 0.1-0.3 s; generous for a shared machine
        assert len(out) == 6 * 360 and not out.isna().any().any()
        state = json.loads(json.dumps(model.fitted_state()))
        assert set(state["residual_distribution"]) == {str(h) for h in range(1, 7)}


def test_sampled_fit_rows_are_the_rows_the_frame_subsample_keeps() -> None:
    """The fit picks its rows by position (no copy of the whole frame); they must be the rows that
    `subsample(horizon_rows(...))` (pandas' seeded `sample`) keeps, so forecasts stay as they were."""
    sim = simulate(n_origins=6, n_destinations=10, n_months=48, horizon=3, missing_share=0.05, seed=3)
    frame = sim.frame.iloc[::-1]  # labels no longer equal positions, and they fall
    for h, max_rows in ((1, 500), (3, 1000), (2, None), (2, 10**6)):
        expected = subsample(horizon_rows(frame, h), max_rows, 7 + h).index
        got = frame.index[sampled_positions(frame, h, max_rows, 7 + h)]
        assert sorted(got) == sorted(expected) and len(got) == len(expected)
    assert len(expected) < len(frame)  # rows without a known target are left out

    # and the whole fit agrees with one fitted on the copied rows, bucket by bucket
    for cls in (Persistence, SeasonalPersistence, RollingMean):
        model = cls(horizon=3, quantiles=LEVELS, max_rows=700, seed=5).fit(frame)
        for h in (1, 2, 3):
            rows = subsample(horizon_rows(frame, h), 700, 5 + h)
            reference = ResidualQuantiles(LEVELS).fit(rows[f"target_{h}"].to_numpy(dtype=float), model.point(rows, h))
            assert model.residual_[h].state() == reference.state(), (cls.name, h)
