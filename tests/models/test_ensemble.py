"""Ensemble: WIS helper, Vincentization, weights from validation and from the accuracy log, real members."""

from __future__ import annotations

import json
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

sys.path.insert(0, str(Path(__file__).parent))
from _frames_d2 import simulate  # noqa: E402

from dyadcast.distributions import nbinom_p_positive, nbinom_quantiles  # noqa: E402
from dyadcast.models.base import CountModel, forecast_columns, quantile_column, target_months  # noqa: E402
from dyadcast.models.ensemble import Ensemble, combine_forecasts, weights_from_scores, wis  # noqa: E402

LEVELS = (0.05, 0.25, 0.5, 0.75, 0.95)
QCOLS = [quantile_column(q) for q in LEVELS]


class _Scaled(CountModel):
    """Point = factor x roll_mean_12 with NB2(alpha = 0.5) quantiles: a cheap member with known quality."""

    factor = 1.0

    def _fit(self, train):
        pass

    def _predict_horizon(self, rows, horizon):
        mu = self.factor * np.nan_to_num(rows["roll_mean_12"].to_numpy(dtype=float))
        out = pd.DataFrame({"origin": rows["origin"].to_numpy(), "destination": rows["destination"].to_numpy(),
                            "horizon": horizon, "target_month": target_months(rows, horizon).to_numpy(), "mean": mu})
        out[QCOLS] = nbinom_quantiles(mu, 0.5, LEVELS)
        out["p_positive"] = nbinom_p_positive(mu, 0.5)
        return out


class Good(_Scaled):
    name = "good_member"


class Biased(_Scaled):
    name = "biased_member"
    factor = 2.5


@pytest.fixture(scope="module")
def sim():
    return simulate(n_origins=6, n_destinations=15, n_months=48, horizon=3, alpha=0.5, seed=17)


def test_wis_follows_bracher_et_al_2021():
    """Against the paper's definition (Bracher, Ray, Gneiting & Reich 2021, PLOS Comput. Biol., eq. 2-3):
    WIS = (0.5 |y - m| + sum_k alpha_k/2 IS_alpha_k) / (K + 1/2), IS_a = (u - l) + 2/a (l - y)_+ + 2/a (y - u)_+."""
    rng = np.random.default_rng(2)
    y = rng.poisson(5, 300).astype(float)
    q = np.sort(rng.gamma(2, 3, (300, 5)), axis=1)

    def interval(lo, hi, a):
        return (hi - lo) + 2 / a * np.maximum(lo - y, 0) + 2 / a * np.maximum(y - hi, 0)

    by_hand = (0.5 * np.abs(y - q[:, 2]) + 0.25 * interval(q[:, 1], q[:, 3], 0.5)
               + 0.05 * interval(q[:, 0], q[:, 4], 0.1)) / 2.5
    np.testing.assert_allclose(wis(y, q, LEVELS), by_hand, rtol=1e-12)
    # worked by hand: y = 10, quantiles (1, 2, 4, 6, 8): IS_0.5 = 4 + 4*4 = 20, IS_0.1 = 7 + 20*2 = 47,
    # WIS = (0.5*6 + 0.25*20 + 0.05*47) / 2.5 = (3 + 5 + 2.35) / 2.5 = 4.14
    assert wis(np.array([10.0]), np.array([[1.0, 2, 4, 6, 8]]), LEVELS)[0] == pytest.approx(4.14)
    metrics = pytest.importorskip("dyadcast.scoring.metrics")  # the accuracy log's WIS must agree with ours
    theirs = metrics.weighted_interval_score(y, q[:, 2], q[:, [1, 0]], q[:, [3, 4]], np.array([0.5, 0.1])).wis
    np.testing.assert_allclose(wis(y, q, LEVELS), theirs, rtol=1e-12)


def test_vincentization_averages_quantiles_level_by_level():
    key = {"origin": ["XAA"], "destination": ["QMA"], "horizon": [1], "target_month": [pd.Timestamp("2031-01-01")]}
    a = pd.DataFrame({**key, "mean": [4.0], "q050": [0.0], "q250": [2.0], "q500": [4.0], "q750": [6.0],
                      "q950": [10.0], "p_positive": [0.9]})
    b = pd.DataFrame({**key, "mean": [10.0], "q050": [4.0], "q250": [8.0], "q500": [10.0], "q750": [12.0],
                      "q950": [20.0], "p_positive": [1.0]})
    out = combine_forecasts({"a": a, "b": b}, {1: {"a": 0.75, "b": 0.25}}, LEVELS)
    assert list(out.columns) == forecast_columns(LEVELS)
    row = out.iloc[0]
    assert row["mean"] == pytest.approx(5.5) and row["p_positive"] == pytest.approx(0.925)
    np.testing.assert_allclose(row[QCOLS].to_numpy(dtype=float), [1.0, 3.5, 5.5, 7.5, 12.5])
    # a member without the row: the other member's forecast is used alone (weights renormalised)
    only = combine_forecasts({"a": a, "b": b.iloc[0:0]}, {"a": 0.5, "b": 0.5}, LEVELS)
    np.testing.assert_allclose(only[QCOLS].to_numpy(dtype=float)[0], [0, 2, 4, 6, 10])


def test_validation_weights_favour_the_better_member(sim):
    model = Ensemble(3, LEVELS, members=(Good(3, LEVELS), Biased(3, LEVELS))).fit(sim.train)
    state = model.fitted_state()
    json.dumps(state)  # goes into the snapshot's metadata.json
    for h in ("1", "2", "3"):
        assert state["weight_source"][h] == "validation"
        scores = state["validation_wis"][h]
        assert scores["good_member"] < scores["biased_member"]
        w = state["weights"][h]
        assert w["good_member"] > 0.6 and w["good_member"] + w["biased_member"] == pytest.approx(1.0)
        assert w["good_member"] / w["biased_member"] == pytest.approx(scores["biased_member"] / scores["good_member"])
    assert state["pseudo_cutoff"] < str(sim.train["month"].max())
    forecast = model.predict(sim.rows)
    assert list(forecast.columns) == forecast_columns(LEVELS) and len(forecast) == 3 * len(sim.rows)
    # the combined mean lies between the members', nearer the better one
    keys = ["origin", "destination", "horizon"]
    both = forecast.merge(Good(3, LEVELS).fit(sim.train).predict(sim.rows), on=keys, suffixes=("", "_good"))
    good, combined = both["mean_good"].to_numpy(), both["mean"].to_numpy()
    assert len(both) == len(forecast)
    assert np.all((good - 1e-9 <= combined) & (combined <= 2.5 * good + 1e-9))
    assert np.mean(np.abs(combined - good)) < np.mean(np.abs(combined - 2.5 * good))


def test_accuracy_log_weights_replace_validation():
    summary = pd.DataFrame({"model": ["good_member", "biased_member", "good_member", "biased_member", "other"],
                            "horizon": [1, 1, 2, 2, 1], "mean_wis": [1.0, 3.0, 2.0, 2.0, 0.1]})
    model = Ensemble(2, LEVELS, members=(Good(2, LEVELS), Biased(2, LEVELS))).set_weights_from_accuracy(summary)
    assert model.accuracy_weights_[1] == pytest.approx({"good_member": 0.75, "biased_member": 0.25})
    assert model.accuracy_weights_[2] == pytest.approx({"good_member": 0.5, "biased_member": 0.5})
    assert weights_from_scores({3: {"a": 2.0, "b": np.nan}}) == {3: {"a": 1.0}}
    with pytest.raises(ValueError, match="mean_wis"):
        model.set_weights_from_accuracy(summary.drop(columns="mean_wis"))


def test_given_weights_skip_validation_and_real_members_run(sim):
    model = Ensemble(3, LEVELS, members=("persistence", "rolling_mean"), weights={"persistence": 1.0,
                                                                                  "rolling_mean": 3.0})
    model.fit(sim.train)
    state = model.fitted_state()
    assert state["weight_source"] == {"1": "given", "2": "given", "3": "given"}
    assert state["weights"]["2"] == pytest.approx({"persistence": 0.25, "rolling_mean": 0.75})
    forecast = model.predict(sim.rows)
    assert list(forecast.columns) == forecast_columns(LEVELS)
    assert (np.diff(forecast[QCOLS].to_numpy(), axis=1) >= 0).all()
    assert model.get_params()["members"] == ("persistence", "rolling_mean")


def test_refresh_carries_last_months_weights_and_skips_the_validation(sim):
    first = Ensemble(3, LEVELS, members=(Good(3, LEVELS), Biased(3, LEVELS))).fit(sim.train)
    state = json.loads(json.dumps(first.fitted_state()))
    again = Ensemble(3, LEVELS, members=(Good(3, LEVELS), Biased(3, LEVELS)), tune=False, params=state)
    again.fit(sim.train)
    new = again.fitted_state()
    assert new["weight_source"] == {"1": "previous fit", "2": "previous fit", "3": "previous fit"}
    assert new["validation_wis"] == {}  # no second validation fit: the saving in "refresh" mode
    for h in ("1", "2", "3"):
        assert new["weights"][h] == pytest.approx(state["weights"][h])
    assert new["pseudo_cutoff"] == state["pseudo_cutoff"]  # where those weights were validated
    # fit mode re-validates even with a stored state
    tuned = Ensemble(3, LEVELS, members=(Good(3, LEVELS), Biased(3, LEVELS)), tune=True, params=state).fit(sim.train)
    assert set(tuned.fitted_state()["weight_source"].values()) == {"validation"}


def test_members_fitted_earlier_in_the_cycle_are_reused():
    sim = simulate(n_origins=4, n_destinations=8, n_months=40, horizon=2, alpha=0.5, seed=18)
    from dyadcast.models.registry import make_model

    earlier = {"persistence": make_model("persistence", 2, LEVELS).fit(sim.train)}
    model = Ensemble(2, LEVELS, members=("persistence", "rolling_mean"), weights={"persistence": 1, "rolling_mean": 1})
    model.use_fitted_members(earlier).fit(sim.train)
    assert model.fitted_members_["persistence"] is earlier["persistence"]
    assert model.fitted_state()["member_source"] == {"persistence": "fitted earlier in the cycle",
                                                     "rolling_mean": "fitted here"}
    assert list(model.predict(sim.rows).columns) == forecast_columns(LEVELS)


def test_real_members_refresh_from_their_stored_states(sim):
    """Validation fits hand the tuned GBM power to the final fit; a refresh starts members from their state."""
    fast = {"tweedie_gbm": {"max_rounds": 60, "power_grid": (1.2, 1.5)}}
    model = Ensemble(3, LEVELS, members=("poisson_glm", "tweedie_gbm"), member_options=fast).fit(sim.train)
    state = json.loads(json.dumps(model.fitted_state()))
    gbm = state["members"]["tweedie_gbm"]
    assert all(len(d) == 1 for d in gbm["validation_deviance"].values())  # final fit reused the chosen power
    refreshed = Ensemble(3, LEVELS, members=("poisson_glm", "tweedie_gbm"), member_options=fast, tune=False,
                         params=state).fit(sim.train)
    members = refreshed.fitted_state()["members"]
    assert all(s["start"].startswith("previous fit") for s in members["poisson_glm"].values())
    assert members["tweedie_gbm"]["power"] == gbm["power"] and members["tweedie_gbm"]["rounds"] == gbm["rounds"]
