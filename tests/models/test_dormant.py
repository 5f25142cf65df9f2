"""Dormant dyads: the split, the pooled wake-up probability and size mixture, and speed at 40,000 dyads."""

from __future__ import annotations

import json
import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

sys.path.insert(0, str(Path(__file__).parent))
from _frames_d2 import simulate  # noqa: E402

from dyadcast.models.base import CountModel, forecast_columns  # noqa: E402
from dyadcast.models.dormant import DormantForecaster, dormant_mask, forecast_with_dormant, split_dormant  # noqa: E402

LEVELS = (0.05, 0.25, 0.5, 0.75, 0.95)


@pytest.fixture(scope="module")
def sleepy():
    """Every dyad dormant-type: positive with probability 0.03 each month, size 1 + Poisson(2)."""
    return simulate(n_origins=10, n_destinations=40, n_months=60, horizon=3, dormant_share=1.0, wake_rate=0.03,
                    wake_size=2.0, seed=21)


def test_dormant_mask_and_split_partition_the_dyads():
    frame = pd.DataFrame({"origin": ["XAA"] * 4, "destination": ["QMA", "QMB", "QMC", "QMD"],
                          "months_since_positive": [0.0, 11.0, 12.0, np.nan]})
    np.testing.assert_array_equal(dormant_mask(frame, 12), [False, False, True, True])  # NaN: never positive
    sim = simulate(n_origins=4, n_destinations=10, n_months=40, horizon=2, dormant_share=0.5, seed=2)
    active_train, active_rows, dormant_rows = split_dormant(sim.train, sim.rows, 12)
    assert len(active_rows) + len(dormant_rows) == len(sim.rows)
    assert len(dormant_rows) > 0 and len(active_rows) > 0
    keys = ["origin", "destination"]
    sleeping = set(map(tuple, dormant_rows[keys].to_numpy()))
    assert not sleeping & set(map(tuple, active_train[keys].to_numpy()))  # dormant dyads never fitted row by row
    assert (dormant_rows["months_since_positive"] >= 12).all()
    with pytest.raises(KeyError, match="months_since_positive"):
        dormant_mask(frame.drop(columns="months_since_positive"), 12)


def test_p_positive_matches_the_simulated_wake_rate(sleepy):
    model = DormantForecaster(3, LEVELS, lookback=12).fit(sleepy.train)
    json.dumps(model.fitted_state())  # goes into the snapshot's metadata.json
    state = model.fitted_state()["horizons"]
    for h in (1, 2, 3):
        n, k = state[str(h)]["rows"], state[str(h)]["positive"]
        se = np.sqrt(0.03 * 0.97 / n)
        assert abs(k / n - 0.03) < 3.5 * se, (h, k / n, se)
        # every bucket shares the true rate here; the shrunk bucket estimates stay close to it
        assert abs(state[str(h)]["p_pooled"] - 0.03) < 3.5 * se
        assert state[str(h)]["size_mean"] == pytest.approx(3.0, abs=0.35)  # 1 + Poisson(2) has mean 3
    forecast = model.predict(sleepy.rows[dormant_mask(sleepy.rows, 12)])
    assert list(forecast.columns) == forecast_columns(LEVELS)
    assert forecast["p_positive"].between(0.015, 0.05).all()
    # P(>0) = 0.03 < 0.05: every listed quantile is 0 and the mean is p x mean size
    assert (forecast[["q050", "q250", "q500", "q750", "q950"]].to_numpy() == 0).all()
    np.testing.assert_allclose(forecast["mean"], forecast["p_positive"] * np.repeat(
        [state[str(h)]["size_mean"] for h in (1, 2, 3)], len(forecast) // 3), rtol=1e-12)
    # held-out check: the share of dormant dyads that woke after the cutoff agrees with the forecast
    future = sleepy.future.merge(forecast[["origin", "destination", "horizon", "p_positive"]])
    woke = (future["arrivals"] > 0).mean()
    assert abs(woke - future["p_positive"].mean()) < 3.5 * np.sqrt(0.03 * 0.97 / len(future))


def test_upper_quantile_turns_positive_when_wake_rate_exceeds_its_tail():
    sim = simulate(n_origins=8, n_destinations=30, n_months=60, horizon=2, dormant_share=1.0, wake_rate=0.12,
                   wake_size=3.0, seed=5)
    model = DormantForecaster(2, LEVELS, lookback=6).fit(sim.train)
    forecast = model.predict(sim.rows[dormant_mask(sim.rows, 6)])
    assert (forecast["p_positive"] > 0.05).all()
    assert (forecast["q950"] >= 1).all() and (forecast["q750"] == 0).all()
    # mixture quantile: P(Y <= q950) >= 0.95 using the true size law 1 + Poisson(3)
    from scipy import stats  # reference CDF of the simulated size distribution

    p = forecast["p_positive"].to_numpy()
    cdf_at_q = 1 - p + p * stats.poisson.cdf(forecast["q950"].to_numpy() - 1, 3.0)
    assert (cdf_at_q >= 0.93).all()


def test_predict_is_vectorised_at_40000_dyads(sleepy):
    model = DormantForecaster(3, LEVELS, lookback=12).fit(sleepy.train)
    rng = np.random.default_rng(0)
    n = 40_000
    rows = pd.DataFrame({"origin": [f"X{chr(65 + i % 26)}{chr(65 + (i // 26) % 26)}" for i in range(n)],
                         "destination": [f"Q{chr(77 + (i // 676) % 13)}{chr(65 + (i // 26) % 26)}" for i in range(n)],
                         "month": pd.Timestamp("2030-06-01"), "months_since_positive": rng.choice([30.0, 120.0], n),
                         "log_distance": rng.uniform(5, 9, n), "contiguous": rng.integers(0, 2, n).astype(float)})
    started = time.perf_counter()
    forecast = model.predict(rows)
    elapsed = time.perf_counter() - started
    assert len(forecast) == 3 * n
    assert elapsed < 10.0, elapsed  # measured ~0.2 s; a row-by-row loop would take minutes


def test_forecast_with_dormant_covers_every_dyad_once():
    class LastValue(CountModel):
        name = "last_value"

        def _fit(self, train):
            pass

        def _predict_horizon(self, rows, horizon):
            from dyadcast.models.base import target_months

            out = pd.DataFrame({"origin": rows["origin"], "destination": rows["destination"], "horizon": horizon,
                                "target_month": target_months(rows, horizon), "mean": rows["lag_1"]})
            for q in ("q050", "q250", "q500", "q750", "q950"):
                out[q] = rows["lag_1"]
            out["p_positive"] = (rows["lag_1"] > 0).astype(float)
            return out

    sim = simulate(n_origins=4, n_destinations=10, n_months=40, horizon=2, dormant_share=0.5, seed=3)
    forecast, sleeper = forecast_with_dormant(LastValue(2, LEVELS), sim.train, sim.rows, 12)
    assert len(forecast) == 2 * len(sim.rows)
    assert not forecast.duplicated(["origin", "destination", "horizon"]).any()
    assert sleeper.is_fitted


def test_split_matches_pairs_as_a_multiindex_does() -> None:
    """The split looks dyads up by integer codes; the pairs it keeps must be those MultiIndex.isin keeps,
    including a code absent from training, a pair whose two codes exist apart, and missing codes."""
    from dyadcast.models.dormant import _in_dyads

    frame = pd.DataFrame({"origin": ["A", "A", "B", "B", None, "C", "A"],
                          "destination": ["x", "y", "x", "y", "x", None, "x"]}).astype("str")
    dyads = pd.DataFrame({"origin": ["A", "B", "D", None, "C", "C"],
                          "destination": ["x", "y", "x", "x", "y", None]}).astype("str")
    expected = pd.MultiIndex.from_frame(frame).isin(pd.MultiIndex.from_frame(dyads))
    assert _in_dyads(frame, dyads).tolist() == expected.tolist() == [True, False, False, True, True, True, True]
    assert not _in_dyads(frame, dyads.iloc[0:0]).any()
