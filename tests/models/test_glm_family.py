"""Poisson GLM, PPML gravity and the NB / ZINB / hurdle NB regressions: fitting, prediction, fallbacks."""

from __future__ import annotations

import json
import warnings

import numpy as np
import pandas as pd
import pytest
from conftest import simulate

from dyadcast.models import count_regression as cr
from dyadcast.models.base import forecast_columns
from dyadcast.models.design import Design, active_dyads, horizon_rows, in_dyads, target_calendar_month
from dyadcast.models.poisson_glm import PoissonGLM, fit_poisson_glm
from dyadcast.models.ppml import PPMLGravity

LEVELS = (0.05, 0.25, 0.5, 0.75, 0.95)


# --- design matrices --------------------------------------------------------------------------------

def test_design_missing_values_unseen_levels_collinearity_and_season() -> None:
    rng = np.random.default_rng(0)
    n = 40
    lag_1 = rng.poisson(3, n).astype(float)
    lag_1[[0, 5]] = np.nan
    train = pd.DataFrame({
        "origin": rng.choice(["XAA", "XAB", "XAC"], n), "lag_1": lag_1,
        "x": np.r_[np.nan, rng.normal(size=n - 1)],
        "month": pd.date_range("2021-01-01", periods=n, freq="MS"),
    })
    train["lag_2"] = train["lag_1"]  # an exact copy must be dropped, not crash a Newton step
    d = Design(log1p=("lag_1", "lag_2"), numeric=("x",), categorical=("origin",), season="dummies")
    d.fit(train, 3)
    assert d.dropped_ == ["log1p_lag_2", "lag_2_missing"]
    assert d.names_[:2] == ["const", "log1p_lag_1"] and {"lag_1_missing", "x_missing"} <= set(d.names_)
    new = pd.DataFrame({"origin": ["XZZ"], "lag_1": [np.nan], "lag_2": [np.nan], "x": [np.nan],
                        "month": pd.to_datetime(["2024-11-01"])})
    row = dict(zip(d.names_, d.transform(new, 3)[0], strict=True))
    assert row["origin[XAB]"] == row["origin[XAC]"] == pytest.approx(1 / 3)  # unseen: average effect
    assert row["x"] == pytest.approx(train["x"].median()) and row["x_missing"] == 1.0
    assert row["log1p_lag_1"] == 0.0 and row["lag_1_missing"] == 1.0
    # November + 3 months is February
    assert target_calendar_month(new, 3)[0] == 2 and row["target_month[2]"] == 1.0
    with pytest.raises(KeyError, match="lag_1"):
        d.transform(new.drop(columns="lag_1"), 3)


# --- Poisson GLM --------------------------------------------------------------------------------------

def test_dobson_poisson_regression_through_the_glm_helper() -> None:
    from sklearn.metrics import mean_poisson_deviance

    # Dobson (1990), An Introduction to Generalized Linear Models, p. 93, as printed in R's ?glm:
    # counts ~ outcome + treatment: intercept 3.0445, outcome2 -0.4543, outcome3 -0.2930, residual
    # deviance 5.1291 on 4 degrees of freedom.
    data = pd.DataFrame({"counts": [18, 17, 15, 20, 10, 20, 25, 13, 12], "outcome": [1, 2, 3] * 3,
                         "treatment": [1] * 3 + [2] * 3 + [3] * 3})
    design = Design(categorical=("outcome", "treatment")).fit(data)
    fit = fit_poisson_glm(design.transform(data), data["counts"].to_numpy(), design.names_)
    coef = dict(zip(fit.names, fit.params, strict=True))
    assert fit.converged and fit.method == "newton"
    assert coef["const"] == pytest.approx(3.0445, abs=5e-5)
    assert coef["outcome[2]"] == pytest.approx(-0.4543, abs=5e-5)
    assert coef["outcome[3]"] == pytest.approx(-0.2930, abs=5e-5)
    assert abs(coef["treatment[2]"]) < 1e-8 and abs(coef["treatment[3]"]) < 1e-8
    assert fit.deviance == pytest.approx(5.1291, abs=5e-5) and fit.df_resid == 4
    # reference library: scikit-learn's mean Poisson deviance times n is the residual deviance
    assert fit.deviance == pytest.approx(mean_poisson_deviance(data["counts"], fit.fitted) * 9, rel=1e-10)


@pytest.fixture(scope="module")
def sim():
    return simulate(n_origins=6, n_destinations=10, n_months=36, horizon=3, missing_share=0.02, seed=1)


def test_poisson_glm_matches_statsmodels_formula_fit_and_fits_active_dyads_only(sim) -> None:
    import statsmodels.api as sm
    import statsmodels.formula.api as smf

    model = PoissonGLM(horizon=3).fit(sim.frame)
    active = sim.frame[in_dyads(sim.frame, active_dyads(sim.frame))]
    assert len(active) < len(sim.frame)  # the simulation has dormant dyads, and they are left out
    assert model.fitted_state()["1"]["n_rows"] == len(horizon_rows(active, 1))
    # Reference: the same regression written as a patsy formula in statsmodels, on rows without NaN
    # features (where the model adds no missing indicators).
    rows = horizon_rows(active, 2).dropna(subset=["lag_1", "roll_mean_3", "roll_mean_12"])
    rows = rows.assign(tm=target_calendar_month(rows, 2))
    ref = smf.glm("target_2 ~ np.log1p(lag_1) + np.log1p(roll_mean_3) + np.log1p(roll_mean_12) + C(origin)"
                  " + C(destination) + C(tm)", data=rows, family=sm.families.Poisson()).fit()
    design = Design(log1p=("lag_1", "roll_mean_3", "roll_mean_12"), categorical=("origin", "destination"),
                    season="dummies").fit(rows, 2)
    ours = fit_poisson_glm(design.transform(rows, 2), rows["target_2"].to_numpy(), design.names_)
    assert np.allclose(ours.fitted, ref.fittedvalues, rtol=1e-6)
    assert ours.deviance == pytest.approx(ref.deviance, rel=1e-8)
    # the model's predict path reproduces its own in-sample fit
    rows1 = horizon_rows(active, 1)
    assert np.allclose(model.predict_mean(rows1, 1), model.fits_[1].fitted, rtol=1e-9)


def test_poisson_glm_forecast_contract_and_artifacts(sim, tmp_path) -> None:
    model = PoissonGLM(horizon=3).fit(sim.frame)
    out = model.predict(sim.rows)
    assert list(out.columns) == forecast_columns(LEVELS)
    assert len(out) == 3 * len(sim.rows) and not out.isna().any().any()
    alpha = model.alpha_[1]
    h1 = out[out["horizon"] == 1]
    assert np.allclose(h1["p_positive"], 1 - (1 + alpha * h1["mean"]) ** (-1 / alpha))  # NB2 P(Y = 0)
    state = json.loads(json.dumps(model.fitted_state()))
    assert state["1"]["converged"] and state["1"]["alpha"] > 0
    assert model.save_artifacts(tmp_path) == ["coefficients.csv"]
    table = pd.read_csv(tmp_path / "coefficients.csv")
    assert {"horizon", "term", "estimate", "std_error"} <= set(table.columns)
    assert (table["term"] == "nb_alpha").sum() == 3


# --- PPML gravity -------------------------------------------------------------------------------------

def test_ppml_carries_fixed_effects_forward(sim, tmp_path) -> None:
    model = PPMLGravity(horizon=2).fit(sim.frame)
    active = sim.frame[in_dyads(sim.frame, active_dyads(sim.frame))]
    rows = horizon_rows(active, 1)
    fit = model.fits_[1]
    # our linear predictor (coefficients + stored fixed effects) reproduces pyfixest's response predictions
    assert np.allclose(model.predict_mean(rows, 1), fit.fitted, rtol=1e-3)
    # distance deters arrivals (true elasticity in the simulation: -1.1)
    assert -1.8 < model.fitted_state()["1"]["coefficients"]["log_distance"] < -0.5
    unseen = sim.rows.head(2).assign(origin="XZZ")
    assert np.isfinite(model.predict_mean(unseen, 1)).all()
    out = model.predict(sim.rows)
    assert list(out.columns) == forecast_columns(LEVELS)
    json.dumps(model.fitted_state())
    assert model.save_artifacts(tmp_path) == ["coefficients.csv", "fixed_effects.csv"]
    effects = pd.read_csv(tmp_path / "fixed_effects.csv")
    assert set(effects["effect"]) == {"origin", "destination", "target_month"}


# --- NB, ZINB, hurdle NB ----------------------------------------------------------------------------

@pytest.mark.parametrize("name", ["negative_binomial", "zinb", "hurdle_nb"])
def test_count_models_forecast_and_state(sim, name, tmp_path) -> None:
    from dyadcast.models.registry import make_model

    model = make_model(name, horizon=2, quantiles=LEVELS)
    with warnings.catch_warnings():
        warnings.simplefilter("error", category=UserWarning)  # no fallback expected on this data
        model.fit(sim.frame)
    out = model.predict(sim.rows)
    assert list(out.columns) == forecast_columns(LEVELS) and len(out) == 2 * len(sim.rows)
    state = json.loads(json.dumps(model.fitted_state()))
    assert state["1"]["family"] == model.kind and state["1"]["fallbacks"] == []
    assert model.save_artifacts(tmp_path) == ["coefficients.csv"]


def test_closed_form_quantiles_equal_statsmodels_distributions(sim) -> None:
    from statsmodels.discrete.count_model import ZeroInflatedNegativeBinomialP
    from statsmodels.discrete.discrete_model import NegativeBinomial
    from statsmodels.discrete.truncated_model import TruncatedLFNegativeBinomialP

    from dyadcast.distributions import quantiles_from_pmf

    rows = cr.with_derived(horizon_rows(sim.frame, 1))
    model = cr.ZeroInflatedNB(horizon=1)
    count, zero = model._designs(rows, 1)
    X, Z, y = count.transform(rows, 1), zero.transform(rows, 1), rows["target_1"].to_numpy()
    levels = (0.1, 0.5, 0.9)
    nb = cr.fit_nb(y, X)
    ref = NegativeBinomial(y, X, loglike_method="nb2").get_distribution(np.r_[nb.count_params, nb.alpha])
    assert np.array_equal(nb.predict(X, Z, levels)[1], np.column_stack([ref.ppf(q) for q in levels]))
    zinb = cr.fit_zinb(y, X, Z)
    ref = ZeroInflatedNegativeBinomialP(y, X, exog_infl=Z, p=2).get_distribution(
        np.r_[zinb.zero_params, zinb.count_params, zinb.alpha])
    assert np.array_equal(zinb.predict(X, Z, levels)[1], np.column_stack([ref.ppf(q) for q in levels]))
    # hurdle: no get_distribution in statsmodels; build its pmf from the truncated model's
    # predict(which="prob", y_values=...) and the logit probability, then search the CDF
    hurdle = cr.fit_hurdle_nb(y, X, Z)
    grid = np.arange(0, 4000)
    trunc = TruncatedLFNegativeBinomialP(y[y > 0], X[y > 0], p=2).predict(
        np.r_[hurdle.count_params, hurdle.alpha], exog=X, which="prob", y_values=grid)
    p_pos = hurdle.predict(X, Z, levels)[2]
    pmf = p_pos[:, None] * trunc
    pmf[:, 0] = 1 - p_pos
    assert pmf.sum(axis=1).min() > 0.999  # the grid holds the mass (tail check)
    assert np.array_equal(hurdle.predict(X, Z, levels)[1], quantiles_from_pmf(pmf, levels))


def test_fallback_chain_warns_and_is_recorded(sim, monkeypatch) -> None:
    def broken(y, X, Z):
        raise cr.FitFailed("ZINB: optimiser did not converge")

    monkeypatch.setitem(cr.FITTERS, "zinb", broken)
    model = cr.ZeroInflatedNB(horizon=1)
    with pytest.warns(UserWarning, match=r"zinb horizon 1: zinb failed .*did not converge.*fell back to nb"):
        model.fit(sim.frame)
    state = model.fitted_state()
    assert state["1"]["family"] == "nb" and "fell back to nb" in state["1"]["fallbacks"][0]
    monkeypatch.setitem(cr.FITTERS, "nb", broken)
    nb = cr.NegativeBinomialModel(horizon=1)
    with pytest.warns(UserWarning, match="fell back to poisson"):
        nb.fit(sim.frame)
    assert nb.fitted_state()["1"]["family"] == "poisson" and nb.fits_[1].alpha > 0  # NB alpha on top
    assert not nb.predict(sim.rows).isna().any().any()
