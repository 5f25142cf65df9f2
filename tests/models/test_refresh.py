"""Refresh mode (last month's fitted state as the start) and quiet fits: what keeps the monthly cycle fast.

A refresh must give the forecast a cold fit gives (it only starts the same optimisation nearer the optimum),
in fewer Newton steps, and say in its state where it started. The data are invented (conftest.simulate).
"""

from __future__ import annotations

import json
import warnings

import numpy as np
import pandas as pd
import pytest
from conftest import simulate

from dyadcast.models import count_regression as cr
from dyadcast.models.base import quantile_column
from dyadcast.models.registry import make_model

LEVELS = (0.05, 0.25, 0.5, 0.75, 0.95)
REGRESSIONS = ["poisson_glm", "ppml_gravity", "negative_binomial", "zinb", "hurdle_nb"]


@pytest.fixture(scope="module")
def months():
    """(frame at cutoff C - 1, frame at cutoff C): what two consecutive monthly cycles train on.

    Active dyads only, as the cycle fits them (dormant ones go to the pooled forecaster). With never-positive
    dyads in the frame the ZINB likelihood had two local optima (llf 1.9 apart) and a refresh followed last
    month's, which was the better one; see count_regression's docstring.
    """
    sim = simulate(n_origins=6, n_destinations=12, n_months=40, horizon=3, level=1.5, alpha=0.7,
                   dormant_share=0.0, seed=21)
    frame = sim.frame
    last = frame["month"].max()
    before = frame[frame["month"] < last].copy()
    anchor = pd.to_datetime(before["month"])
    for h in (1, 2, 3):  # at C - 1 the target months after C - 1 were not known yet
        before.loc[(anchor + pd.DateOffset(months=h) > last - pd.DateOffset(months=1)).to_numpy(), f"target_{h}"] = np.nan
    return before, frame, sim.rows


def _iterations(state: dict) -> int:
    return sum(int(s["newton_iterations"]) for s in state.values())


@pytest.mark.parametrize("name", REGRESSIONS)
def test_refresh_from_last_month_gives_the_cold_forecast_in_fewer_steps(months, name) -> None:
    before, frame, rows = months
    previous = make_model(name, horizon=3, quantiles=LEVELS).fit(before).fitted_state()
    stored = json.loads(json.dumps(previous))  # as the snapshot metadata keeps it
    cold = make_model(name, horizon=3, quantiles=LEVELS, tune=True).fit(frame)
    warm = make_model(name, horizon=3, quantiles=LEVELS, tune=False, params=stored).fit(frame)
    a, b = cold.predict(rows), warm.predict(rows)
    np.testing.assert_allclose(b["mean"], a["mean"], rtol=1e-5)
    np.testing.assert_allclose(b["p_positive"], a["p_positive"], rtol=1e-5, atol=1e-9)
    qcols = [quantile_column(q) for q in LEVELS]
    # discrete quantiles of near-identical distributions can differ only where a level sits on a CDF step
    assert (a[qcols].to_numpy() == b[qcols].to_numpy()).mean() > 0.99
    cold_state, warm_state = cold.fitted_state(), warm.fitted_state()
    assert all(s["start"].startswith("previous fit") for s in warm_state.values())
    assert all(s["start"] == "cold" for s in cold_state.values())
    assert _iterations(warm_state) < _iterations(cold_state)


def test_refresh_ignores_state_in_fit_mode_and_survives_a_changed_design(months) -> None:
    before, frame, _ = months
    state = make_model("zinb", horizon=3, quantiles=LEVELS).fit(before).fitted_state()
    assert all(s["start"] == "cold" for s in
               make_model("zinb", horizon=3, quantiles=LEVELS, tune=True, params=state).fit(frame).fitted_state().values())
    renamed = {h: {**s, "count_coefficients": {f"old_{k}": v for k, v in s["count_coefficients"].items()}}
               for h, s in state.items()}  # last month's terms no longer exist: the count part starts cold
    warm = make_model("zinb", horizon=3, quantiles=LEVELS, tune=False, params=renamed).fit(frame)
    assert all(s["family"] == "zinb" for s in warm.fitted_state().values())


def test_heavy_tailed_counts_fit_without_printing_warnings() -> None:
    """Large, over-dispersed, zero-heavy counts: the fits that used to print RuntimeWarnings stay silent."""
    sim = simulate(n_origins=6, n_destinations=12, n_months=40, horizon=2, level=3.0, alpha=3.0,
                   dormant_share=0.2, seed=22)
    assert sim.frame["target_1"].max() > 2000
    for name in REGRESSIONS:
        with warnings.catch_warnings():
            warnings.simplefilter("error")  # any warning (numpy RuntimeWarning, fallback, ...) fails the test
            out = make_model(name, horizon=2, quantiles=LEVELS).fit(sim.frame).predict(sim.rows)
        assert np.isfinite(out["mean"]).all(), name


def test_fallbacks_make_one_warning_per_fit_and_are_recorded(months, monkeypatch) -> None:
    _, frame, _ = months

    def broken(y, X, Z, **kwargs):
        raise cr.FitFailed("ZINB: Newton did not converge in 100 iterations")

    monkeypatch.setitem(cr.FITTERS, "zinb", broken)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        model = make_model("zinb", horizon=3, quantiles=LEVELS).fit(frame)
    ours = [w for w in caught if issubclass(w.category, cr.ModelFallbackWarning)]
    assert len(ours) == 1 and len(caught) == 1  # one line for the whole fit, nothing else printed
    text = str(ours[0].message)
    assert "\n" not in text and all(f"zinb horizon {h}: zinb failed" in text for h in (1, 2, 3))
    assert all(s["family"] == "nb" and s["fallbacks"] for s in model.fitted_state().values())
