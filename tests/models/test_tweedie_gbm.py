"""TweedieGBM (deviance, calibration, determinism, refresh, artifacts) and the split-conformal calibrator."""

from __future__ import annotations

import json
import sys
from pathlib import Path

import lightgbm as lgb
import numpy as np
import pytest
from scipy import stats
from sklearn.metrics import mean_poisson_deviance, mean_tweedie_deviance

sys.path.insert(0, str(Path(__file__).parent))
from _frames_d2 import simulate  # noqa: E402

from dyadcast.models.base import forecast_columns  # noqa: E402
from dyadcast.models.conformal import ConformalCalibrator  # noqa: E402
from dyadcast.models.tweedie_gbm import TweedieGBM  # noqa: E402
from dyadcast.models.tweedie_gbm import mean_tweedie_deviance as our_deviance  # noqa: E402

LEVELS = (0.05, 0.25, 0.5, 0.75, 0.95)
FAST = {"num_threads": 1, "max_rounds": 120, "early_stopping_rounds": 15, "learning_rate": 0.1}


@pytest.fixture(scope="module")
def sim():
    """10 x 20 dyads, 48 months, H = 3, NB2 with alpha = 0.5 (known process)."""
    return simulate(n_origins=10, n_destinations=20, n_months=48, horizon=3, alpha=0.5, seed=13)


@pytest.fixture(scope="module")
def tuned(sim):
    return TweedieGBM(3, LEVELS, seed=4, tune=True, power_grid=(1.2, 1.5), **FAST).fit(sim.train)


@pytest.fixture(scope="module")
def held_out(sim, tuned):
    return sim.future.merge(tuned.predict(sim.rows), on=["origin", "destination", "horizon"])


def test_deviance_matches_sklearn():
    """Our deviance (used to pick the power) equals scikit-learn's `mean_tweedie_deviance` on the same arrays."""
    rng = np.random.default_rng(0)
    y = rng.negative_binomial(2, 0.3, 500).astype(float)
    mu = rng.gamma(2.0, 3.0, 500)
    for power in (1.0, 1.2, 1.5, 1.8):
        assert our_deviance(y, mu, power) == pytest.approx(mean_tweedie_deviance(y, mu, power=power), rel=1e-10)


def test_recorded_validation_deviance_is_sklearns(tuned):
    state = tuned.fitted_state()
    for h in (1, 2, 3):
        y_val, mu_val = tuned.validation_[h]
        recorded = state["validation_deviance"][str(h)][str(state["power"][str(h)])]
        # source: sklearn.metrics.mean_poisson_deviance (= mean_tweedie_deviance with power=1)
        assert recorded == pytest.approx(mean_poisson_deviance(y_val, mu_val), rel=1e-5)
    assert set(state["validation_deviance"]["1"]) == {"1.2", "1.5"}  # the grid was searched once (horizon 1)
    assert len({state["power"][str(h)] for h in (1, 2, 3)}) == 1


def test_held_out_deviance_between_oracle_and_constant(sim, tuned, held_out):
    """scikit-learn's Poisson deviance: the model beats a constant forecast and cannot beat the true mean."""
    y = held_out["arrivals"].to_numpy()
    model = mean_poisson_deviance(y, held_out["mean"])
    oracle = mean_poisson_deviance(y, held_out["mu"])
    constant = mean_poisson_deviance(y, np.full(y.size, sim.train["target_1"].mean()))
    assert oracle * 0.9 < model < 0.6 * constant, (oracle, model, constant)


def test_intervals_are_calibrated_on_a_known_nb_process(sim, tuned, held_out):
    assert list(tuned.predict(sim.rows).columns) == forecast_columns(LEVELS)
    y = held_out["arrivals"]
    cover90 = ((y >= held_out["q050"]) & (y <= held_out["q950"])).mean()
    assert 0.85 <= cover90 <= 0.95, cover90
    # randomised PIT for counts (Czado, Gneiting & Held 2009, Biometrics 65): uniform when calibrated
    rng = np.random.default_rng(1)
    alpha = held_out["horizon"].map({int(h): a for h, a in tuned.fitted_state()["alpha"].items()}).to_numpy()
    n = 1 / alpha
    p = n / (n + held_out["mean"].to_numpy())
    lo, hi = stats.nbinom.cdf(y - 1, n, p), stats.nbinom.cdf(y, n, p)
    pit = lo + rng.random(y.size) * (hi - lo)
    assert 0.85 <= np.mean((pit > 0.05) & (pit < 0.95)) <= 0.95
    assert 0.44 <= np.mean((pit > 0.25) & (pit < 0.75)) <= 0.56
    # the fitted dispersion absorbs the true alpha (0.5) plus the mean's own estimation error
    assert all(0.4 < a < 0.9 for a in tuned.fitted_state()["alpha"].values())


def test_same_seed_same_forecast(sim, tuned):
    again = TweedieGBM(3, LEVELS, seed=4, tune=True, power_grid=(1.2, 1.5), **FAST).fit(sim.train)
    first, second = tuned.predict(sim.rows), again.predict(sim.rows)
    np.testing.assert_array_equal(first["mean"].to_numpy(), second["mean"].to_numpy())


def test_refresh_reuses_hyperparameters(sim, tuned):
    state = tuned.fitted_state()
    refreshed = TweedieGBM(3, LEVELS, seed=4, tune=False, params=state, **FAST).fit(sim.train)
    new = refreshed.fitted_state()
    assert new["power"] == state["power"] and new["rounds"] == state["rounds"]
    assert all(len(d) == 1 for d in new["validation_deviance"].values())  # no search in refresh mode
    with pytest.raises(ValueError, match="no stored 'rounds'"):
        TweedieGBM(3, LEVELS, tune=False, params={"power": {"1": 1.3}}, **FAST).fit(sim.train)


def test_artifacts_reload_to_the_same_predictions(sim, tuned, tmp_path):
    names = tuned.save_artifacts(tmp_path)
    assert names == ["tweedie_gbm_h1.txt", "tweedie_gbm_h2.txt", "tweedie_gbm_h3.txt"]
    booster = lgb.Booster(model_file=str(tmp_path / names[1]))
    x = tuned._design(sim.rows, 2)
    np.testing.assert_allclose(booster.predict(x), tuned.predict_mean(sim.rows, 2), rtol=1e-6)
    state = tuned.fitted_state()
    assert len(state["feature_importance_top10"]["1"]) == 10
    assert state["quantile_method"] == "parametric:nb-on-gbm-mean"
    json.dumps(state)  # goes into the snapshot's metadata.json
    assert set(state["origin_rho"]) == {"1", "2", "3"}
    assert all(0.0 <= r <= 0.95 for r in state["origin_rho"].values())


def test_conformal_option_is_calibrated(sim):
    model = TweedieGBM(3, LEVELS, seed=4, tune=False, interval_method="conformal", **FAST).fit(sim.train)
    got = sim.future.merge(model.predict(sim.rows), on=["origin", "destination", "horizon"])
    y = got["arrivals"]
    cover90 = ((y >= got["q050"]) & (y <= got["q950"])).mean()
    assert 0.85 <= cover90 <= 0.95, cover90
    assert model.quantile_method.startswith("conformal:split-log1p")
    assert "conformal" in model.fitted_state()


# --- the calibrator on its own ---------------------------------------------------------------------


def test_conformal_rank_rule_on_a_hand_example():
    """n = 9 residuals: level 0.9 uses rank ceil(10 x 0.9) = 9 (the largest), level 0.1 rank floor(1.0) = 1."""
    cal = ConformalCalibrator((0.1, 0.5, 0.9), scale="sqrt", n_bins=1)
    point = np.full(9, 4.0)  # sqrt(point) = 2
    y = (2.0 + np.arange(-4, 5) / 4) ** 2  # sqrt residuals -1.0, -0.75, ..., 1.0
    q = cal.fit(y, point, 1).quantiles(np.array([4.0]), 1)[0]
    np.testing.assert_allclose(q, [(2 - 1.0) ** 2, 2.0**2, (2 + 1.0) ** 2])


def test_conformal_covers_nb_data_and_widens_with_the_flow():
    rng = np.random.default_rng(3)
    mu = rng.gamma(1.0, 20.0, 8000)
    y = rng.negative_binomial(2.0, 2.0 / (2.0 + mu))  # NB2, alpha = 0.5
    cal = ConformalCalibrator(LEVELS).fit(y[:4000], mu[:4000], horizon=1)
    q = cal.quantiles(mu[4000:], 1)
    inside = (y[4000:] >= q[:, 0]) & (y[4000:] <= q[:, -1])
    assert 0.85 <= inside.mean() <= 0.95, inside.mean()
    assert (q >= 0).all() and (np.diff(q, axis=1) >= 0).all()
    width = cal.quantiles(np.array([1.0, 10.0, 100.0]), 1)
    assert width[0, -1] - width[0, 0] < width[1, -1] - width[1, 0] < width[2, -1] - width[2, 0]
    p = cal.p_positive(np.array([0.1, 50.0]), 1)
    assert p[0] < p[1] <= 1.0
    with pytest.raises(KeyError, match="horizon 2 was not fitted"):
        cal.quantiles(mu[:3], 2)


def test_refresh_at_another_learning_rate_chooses_its_rounds_again(sim, tuned):
    state = json.loads(json.dumps(tuned.fitted_state()))
    assert state["learning_rate"] == FAST["learning_rate"]
    other = {**FAST, "learning_rate": 0.3}
    refreshed = TweedieGBM(3, LEVELS, seed=4, tune=False, params=state, **other).fit(sim.train)
    new = refreshed.fitted_state()
    assert new["power"] == state["power"]  # the variance power still carries over
    # rounds learned at 0.1 would be wrong at 0.3: early stopping picked them again (fewer, at a higher rate)
    assert sum(new["rounds"].values()) < sum(state["rounds"].values())
    same = TweedieGBM(3, LEVELS, seed=4, tune=False, params=state, **FAST).fit(sim.train).fitted_state()
    assert same["rounds"] == state["rounds"]
