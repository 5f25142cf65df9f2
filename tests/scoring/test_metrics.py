"""Measures checked against reference libraries and the published definitions."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import scoringrules
from scipy import stats
from sklearn.metrics import (
    mean_pinball_loss,
    mean_poisson_deviance,
    mean_tweedie_deviance,
    precision_score,
    recall_score,
)

from dyadcast.scoring import metrics
from dyadcast.scoring.score import score_frame

RNG_SEED = 20240611


def _random_intervals(rng: np.random.Generator, n: int) -> tuple[np.ndarray, ...]:
    y = rng.gamma(1.5, 40.0, n).round()
    centre = rng.gamma(1.5, 40.0, n)
    lo90 = centre * rng.uniform(0.0, 0.6, n)
    lo50 = lo90 + (centre - lo90) * rng.uniform(0.3, 1.0, n)
    hi50 = centre * rng.uniform(1.0, 1.6, n)
    hi90 = hi50 * rng.uniform(1.0, 2.0, n)
    return y, centre, lo50, hi50, lo90, hi90


@pytest.mark.parametrize("alpha", [0.5, 0.1, 0.2])
def test_interval_score_matches_scoringrules(alpha: float) -> None:
    # Reference: scoringrules 0.10 `interval_score` (Gneiting & Raftery 2007, JASA 102: 359-378, eq. 43).
    rng = np.random.default_rng(RNG_SEED)
    y, _, lo50, hi50, lo90, hi90 = _random_intervals(rng, 5000)
    lower, upper = (lo50, hi50) if alpha == 0.5 else (lo90, hi90)
    ours = metrics.interval_score(y, lower, upper, alpha)
    ref = np.asarray(scoringrules.interval_score(y, lower, upper, alpha))
    np.testing.assert_allclose(ours, ref, rtol=0, atol=1e-9)
    assert (ours > upper - lower).any(), "the random inputs must include misses, or the penalty goes untested"


def test_wis_hand_worked_example() -> None:
    # Computed by hand from the definition in Bracher, Ray, Gneiting & Reich (2021), PLOS Comput. Biol.
    # 17(2): e1008618, eq. 3: WIS = (w0 |y - m| + sum_k (alpha_k / 2) IS_alpha_k) / (K + 1/2), w0 = 1/2.
    # y = 10, median 6, 50 % interval [4, 8], 90 % interval [2, 12]:
    #   IS_0.5 = (8 - 4) + (2 / 0.5)(10 - 8) = 12;  IS_0.1 = 12 - 2 = 10 (covered)
    #   WIS = (0.5 * 4 + 0.25 * 12 + 0.05 * 10) / 2.5 = 5.5 / 2.5 = 2.2
    #   dispersion = (0.25 * 4 + 0.05 * 10) / 2.5 = 0.6
    #   underprediction = (0.5 * 4 + (10 - 8)) / 2.5 = 1.6, overprediction = 0
    parts = metrics.weighted_interval_score(
        [10.0], [6.0], lower=[[4.0, 2.0]], upper=[[8.0, 12.0]], alphas=[0.5, 0.1]
    )
    assert parts.wis[0] == pytest.approx(2.2, abs=1e-12)
    assert parts.dispersion[0] == pytest.approx(0.6, abs=1e-12)
    assert parts.underprediction[0] == pytest.approx(1.6, abs=1e-12)
    assert parts.overprediction[0] == pytest.approx(0.0, abs=1e-12)
    # Mirror image (y = 1 below everything): median error 5, IS_0.5 = 4 + 4 * 3 = 16, IS_0.1 = 10 + 20 * 1 = 30
    # WIS = (2.5 + 4 + 1.5) / 2.5 = 3.2; overprediction = (2.5 + 3 + 1) / 2.5 = 2.6
    low = metrics.weighted_interval_score([1.0], [6.0], [[4.0, 2.0]], [[8.0, 12.0]], [0.5, 0.1])
    assert low.wis[0] == pytest.approx(3.2, abs=1e-12)
    assert low.overprediction[0] == pytest.approx(2.6, abs=1e-12)


def test_wis_identity_on_random_inputs() -> None:
    # Bracher et al. (2021) eq. 3 evaluated with scoringrules' interval scores (not its WIS; see models.md §6).
    rng = np.random.default_rng(RNG_SEED + 1)
    y, median, lo50, hi50, lo90, hi90 = _random_intervals(rng, 5000)
    is50 = np.asarray(scoringrules.interval_score(y, lo50, hi50, 0.5))
    is90 = np.asarray(scoringrules.interval_score(y, lo90, hi90, 0.1))
    expected = (0.5 * np.abs(y - median) + 0.25 * is50 + 0.05 * is90) / 2.5
    parts = metrics.wis_from_quantiles(y, {"q050": lo90, "q250": lo50, "q500": median, "q750": hi50, "q950": hi90})
    np.testing.assert_allclose(parts.wis, expected, rtol=0, atol=1e-9)
    np.testing.assert_allclose(parts.dispersion + parts.overprediction + parts.underprediction, parts.wis, atol=1e-9)
    assert (parts.overprediction > 0).any() and (parts.underprediction > 0).any()


def test_wis_equals_scaled_sum_of_quantile_losses() -> None:
    # WIS with K intervals is (1 / (K + 1/2)) x the sum of pinball losses over its 2K + 1 quantiles (follows from
    # the definition; Bracher et al. 2021 note the link to the quantile score - remark quoted from memory).
    # Reference for the pinball loss: scikit-learn `mean_pinball_loss`.
    rng = np.random.default_rng(RNG_SEED + 2)
    y, median, lo50, hi50, lo90, hi90 = _random_intervals(rng, 4000)
    quantiles = {0.05: lo90, 0.25: lo50, 0.5: median, 0.75: hi50, 0.95: hi90}
    pinball_sum = sum(mean_pinball_loss(y, q, alpha=tau) for tau, q in quantiles.items())
    parts = metrics.wis_from_quantiles(y, {"q050": lo90, "q250": lo50, "q500": median, "q750": hi50, "q950": hi90})
    assert parts.wis.mean() == pytest.approx(pinball_sum / 2.5, rel=1e-12)


def test_deviances_match_scikit_learn() -> None:
    # Reference: scikit-learn `mean_poisson_deviance` and `mean_tweedie_deviance(power=1.5)`.
    rng = np.random.default_rng(RNG_SEED + 3)
    mu = rng.gamma(0.8, 20.0, 3000) + metrics.DEVIANCE_FLOOR  # at or above the floor: no flooring
    y = rng.poisson(mu * rng.gamma(2.0, 0.5, mu.size)).astype(float)
    assert (y == 0).mean() > 0.05
    assert metrics.poisson_deviance(y, mu).mean() == pytest.approx(mean_poisson_deviance(y, mu), rel=1e-10)
    assert metrics.tweedie_deviance(y, mu, power=1.5).mean() == pytest.approx(
        mean_tweedie_deviance(y, mu, power=1.5), rel=1e-10)
    assert metrics.tweedie_deviance(y, mu, power=1.2).mean() == pytest.approx(
        mean_tweedie_deviance(y, mu, power=1.2), rel=1e-10)


def test_deviance_floor_replaces_zero_means() -> None:
    # A zero forecast (persistence after a zero month) is scored as a forecast of the floor, which sklearn
    # (that refuses y_pred <= 0) scores normally.
    y = np.array([0.0, 1.0, 7.0, 0.0])
    mu = np.array([0.0, 0.0, 0.05, 3.0])
    floored = np.maximum(mu, metrics.DEVIANCE_FLOOR)
    assert np.isfinite(metrics.poisson_deviance(y, mu)).all()
    assert metrics.poisson_deviance(y, mu).mean() == pytest.approx(mean_poisson_deviance(y, floored), rel=1e-12)
    assert metrics.tweedie_deviance(y, mu).mean() == pytest.approx(
        mean_tweedie_deviance(y, floored, power=1.5), rel=1e-12)
    # y = 1 against a zero forecast: 2 (ln(1 / 0.1) - 0.9) = 2.8052 (hand-computed)
    assert metrics.poisson_deviance([1.0], [0.0])[0] == pytest.approx(2 * (np.log(10) - 0.9), rel=1e-12)


def test_precision_recall_match_scikit_learn() -> None:
    # Reference: scikit-learn `precision_score` / `recall_score` on the same labels.
    rng = np.random.default_rng(RNG_SEED + 4)
    p = rng.uniform(size=2000)
    actual = rng.uniform(size=2000) < p
    predicted = metrics.predicted_positive(p)
    precision, recall = metrics.precision_recall(predicted, actual)
    assert precision == pytest.approx(precision_score(actual, predicted), rel=1e-12)
    assert recall == pytest.approx(recall_score(actual, predicted), rel=1e-12)
    assert np.isnan(metrics.precision_recall(np.zeros(3, bool), np.ones(3, bool))[0])


def test_coverage_of_true_nb_quantiles_is_nominal() -> None:
    # Forecast quantiles are the true NB quantiles (scipy.stats.nbinom) of the simulated actuals, so the
    # 50 % and 90 % central intervals must cover about 50 % and 90 % of them. The +-3 point tolerance is the
    # brief's; sampling error at n = 20,000 is ~0.35 point and the discreteness of NB counts with means
    # 40-400 adds under 1 point (checked below with the exact CDF).
    rng = np.random.default_rng(RNG_SEED + 5)
    n = 20_000
    mu = rng.uniform(40, 400, n)
    size = rng.choice([2.0, 5.0, 20.0], n)
    prob = size / (size + mu)
    y = rng.negative_binomial(size, prob).astype(float)
    q = {f"q{round(1000 * t):03d}": stats.nbinom.ppf(t, size, prob) for t in (0.05, 0.25, 0.5, 0.75, 0.95)}
    exact50 = np.mean(stats.nbinom.cdf(q["q750"], size, prob) - stats.nbinom.cdf(q["q250"] - 1, size, prob))
    assert abs(exact50 - 0.5) < 0.01
    dyads = [(f"Q{chr(77 + i // 676)}{chr(65 + i // 26 % 26)}", f"X{chr(65 + i // 26 % 26)}{chr(65 + i % 26)}")
             for i in range(n)]
    forecasts = pd.DataFrame({
        "run_id": "r1", "cutoff": pd.Timestamp("2025-01-01"), "model": "nb_truth", "run_kind": "backtest",
        "level": "dyad", "origin": [o for o, _ in dyads], "destination": [d for _, d in dyads], "horizon": 1,
        "target_month": pd.Timestamp("2025-02-01"), "mean": mu, **q, "p_positive": 1 - stats.nbinom.pmf(0, size, prob),
    })
    actuals = pd.DataFrame({"origin": forecasts["origin"], "destination": forecasts["destination"],
                            "month": pd.Timestamp("2025-02-01"), "arrivals": y, "load_id": 1,
                            "published_on": pd.Timestamp("2025-03-10")})
    rows = score_frame(forecasts, actuals, vintage="latest")
    assert len(rows) == n
    assert abs(rows["covered_50"].mean() - 0.50) <= 0.03
    assert abs(rows["covered_90"].mean() - 0.90) <= 0.03
    assert abs(rows["exceeded"].mean() - 0.05) <= 0.015
