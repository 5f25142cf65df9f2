"""The Newton engine behind the regressions: derivatives, optima against statsmodels, warm starts, failures.

Outside references: scipy.stats (log-pmfs), statsmodels' Poisson / NegativeBinomial / ZeroInflatedNegativeBinomialP
/ TruncatedLFNegativeBinomialP (the same likelihoods, their own code) and numpy's matrix rank. The published
NMES1988 fits run through the same engine in test_external_counts.py.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from dyadcast.models import count_regression as cr
from dyadcast.models import mle
from dyadcast.models.design import independent_columns


def _data(n: int = 1500, seed: int = 0, alpha: float = 0.8, inflate: float = 0.3):
    """Invented counts: NB2 with a log-linear mean, a share of structural zeros, heavy right tail."""
    rng = np.random.default_rng(seed)
    X = np.column_stack([np.ones(n), rng.normal(size=n), rng.normal(size=n), rng.integers(0, 2, n)])
    Z = X[:, :3]
    mu = np.exp(X @ np.array([1.2, 0.8, -0.4, 0.5]))
    y = rng.poisson(rng.gamma(1 / alpha, alpha * mu)).astype(float)
    y[rng.random(n) < inflate * (1 + np.tanh(Z[:, 1])) / 2] = 0.0
    return y, X, Z


def _numeric(family: mle.Family, eta: list[np.ndarray], eps: float = 1e-6):
    k = len(eta)
    grad = np.empty((eta[0].size, k))
    hess = np.empty((eta[0].size, k, k))
    for j in range(k):
        up = [e.copy() for e in eta]
        down = [e.copy() for e in eta]
        up[j] += eps
        down[j] -= eps
        grad[:, j] = (family.loglike(up) - family.loglike(down)) / (2 * eps)
        hess[:, :, j] = (family.derivatives(up)[1] - family.derivatives(down)[1]) / (2 * eps)
    return grad, hess


@pytest.mark.parametrize("constant_tau", [True, False])
def test_row_derivatives_match_finite_differences_and_scipy_loglike(constant_tau) -> None:
    rng = np.random.default_rng(1)
    y = np.r_[np.zeros(20), rng.integers(1, 30, 40), [500.0, 4000.0, 38000.0]]  # zeros to a huge flow
    n = y.size
    eta = np.log(np.r_[rng.uniform(0.1, 50, n - 3), [300.0, 5000.0, 20000.0]])
    tau = np.full(n, np.log(0.7)) if constant_tau else rng.normal(-0.5, 1.0, n)
    zeta = rng.normal(-0.5, 1.0, n)
    mu, a = np.exp(eta), np.exp(tau)
    nb = stats.nbinom(1 / a, 1 / (1 + a * mu))
    cases = [
        (mle.Poisson(y), [eta], stats.poisson.logpmf(y, mu)),
        (mle.Logit((y > 0).astype(float)), [zeta], np.where(y > 0, np.log(stats.logistic.cdf(zeta)),
                                                            np.log(stats.logistic.sf(zeta)))),
        (mle.NB2(y), [eta, tau], nb.logpmf(y)),
        (mle.ZINB(y), [zeta, eta, tau],
         np.log(np.where(y == 0, stats.logistic.cdf(zeta), 0.0) + stats.logistic.sf(zeta) * nb.pmf(y))),
    ]
    pos = y > 0
    nb_pos = stats.nbinom(1 / a[pos], 1 / (1 + a[pos] * mu[pos]))
    cases.append((mle.TruncatedNB2(y[pos]), [eta[pos], tau[pos]], nb_pos.logpmf(y[pos]) - np.log(nb_pos.sf(0))))
    for family, predictors, reference in cases:
        ll, g, h = family.derivatives(predictors)
        # reference: scipy.stats log-pmfs (zero-inflated and truncated forms composed by hand)
        np.testing.assert_allclose(ll, reference, rtol=1e-9, atol=1e-9, err_msg=type(family).__name__)
        g_num, h_num = _numeric(family, predictors)
        # central differences carry ~1e-10 / 1e-6 of rounding noise from log-likelihoods near 1e5 (y = 38,000);
        # a wrong formula is off by O(1)
        assert np.max(np.abs(g - g_num) / (1 + np.abs(g))) < 1e-4, type(family).__name__
        assert np.max(np.abs(h - h_num) / (1 + np.abs(h))) < 1e-4, type(family).__name__


def test_poisson_and_nb_optima_equal_statsmodels() -> None:
    from statsmodels.discrete.discrete_model import NegativeBinomial, Poisson

    y, X, _ = _data(inflate=0.0)
    ours = cr.fit_poisson(y, X)
    ref = Poisson(y, X).fit(disp=0)  # reference library: statsmodels' own Newton on the same likelihood
    np.testing.assert_allclose(ours.count_params, ref.params, rtol=1e-7, atol=1e-9)
    assert ours.llf == pytest.approx(ref.llf, rel=1e-12)
    np.testing.assert_allclose(ours.bse["count"], ref.bse, rtol=1e-6)
    nb = cr.fit_nb(y, X)
    ref = NegativeBinomial(y, X, loglike_method="nb2").fit(method="newton", disp=0)
    assert ref.mle_retvals["converged"]
    np.testing.assert_allclose(nb.count_params, ref.params[:-1], rtol=1e-5, atol=1e-6)
    assert nb.alpha == pytest.approx(ref.params[-1], rel=1e-5)
    assert nb.llf == pytest.approx(ref.llf, abs=1e-6)
    assert nb.llf >= ref.llf - 1e-9  # ours is at least as high: a maximum, not a nearby point


def test_zinb_and_truncated_nb_optima_are_stationary_points_of_statsmodels_likelihoods() -> None:
    """statsmodels evaluates the same likelihoods independently: its score at our estimates must vanish."""
    from statsmodels.discrete.count_model import ZeroInflatedNegativeBinomialP
    from statsmodels.discrete.truncated_model import TruncatedLFNegativeBinomialP

    y, X, Z = _data(seed=2)
    zinb = cr.fit_zinb(y, X, Z)
    ref = ZeroInflatedNegativeBinomialP(y, X, exog_infl=Z, p=2)
    theirs = np.r_[zinb.zero_params, zinb.count_params, zinb.alpha]  # statsmodels' order, alpha unlogged
    assert ref.loglike(theirs) == pytest.approx(zinb.llf, rel=1e-12)  # the same likelihood ...
    # ... and our optimum is where its gradient equals the pull of the weak prior on the zero-part slopes
    # (mle.ZERO_PART_RIDGE; zero for the intercept and the count part)
    prior_pull = np.r_[mle.slope_ridge(Z.shape[1]) * zinb.zero_params, np.zeros(X.shape[1] + 1)]
    np.testing.assert_allclose(ref.score(theirs), prior_pull, atol=1e-6)
    hurdle = cr.fit_hurdle_nb(y, X, Z)
    pos = y > 0
    trunc = TruncatedLFNegativeBinomialP(y[pos], X[pos], truncation=0, p=2)
    params = np.r_[hurdle.count_params, hurdle.alpha]
    np.testing.assert_allclose(trunc.score(params), 0.0, atol=1e-6)
    logit_llf = float(np.sum(stats.bernoulli.logpmf(pos, 1 / (1 + np.exp(-Z @ hurdle.zero_params)))))
    assert hurdle.llf == pytest.approx(trunc.loglike(params) + logit_llf, rel=1e-10)


def test_warm_start_reaches_the_same_optimum_in_a_few_steps() -> None:
    y, X, Z = _data(seed=3)
    cold = cr.fit_zinb(y, X, Z)
    nudged = cr.Start(count=cold.count_params * 1.02, zero=cold.zero_params - 0.05, alpha=cold.alpha * 1.1)
    warm = cr.fit_zinb(y, X, Z, start=nudged)
    np.testing.assert_allclose(warm.count_params, cold.count_params, rtol=1e-6, atol=1e-8)
    np.testing.assert_allclose(warm.zero_params, cold.zero_params, rtol=1e-6, atol=1e-8)
    assert warm.llf == pytest.approx(cold.llf, abs=1e-7)
    assert warm.iterations <= 5 < cold.iterations  # the point of "refresh" mode


def test_failures_are_reported_not_returned() -> None:
    y, X, _ = _data(seed=4, inflate=0.0)
    twin = np.column_stack([X, X[:, 1]])  # a duplicated column: the optimum is a ridge, not a point
    with pytest.raises(mle.FitFailed, match="singular|converge"):
        mle.maximize(mle.Poisson(y), [twin], np.zeros(twin.shape[1]), "twin")
    with pytest.raises(mle.FitFailed, match="did not converge in 1 iterations"):
        mle.maximize(mle.NB2(y), [X, np.ones((y.size, 1))], np.zeros(X.shape[1] + 1), "short", maxiter=1)
    with pytest.raises(mle.FitFailed, match="all 5 targets are zero"):
        cr.fit_nb(np.zeros(5), X[:5])
    assert issubclass(mle.ModelFallbackWarning, UserWarning)


def test_independent_columns_keeps_a_basis_of_the_column_space() -> None:
    rng = np.random.default_rng(5)
    base = rng.normal(size=(200, 6))
    m = np.column_stack([np.ones(200), base[:, :3], base[:, 0] + 2 * base[:, 2], np.full(200, 3.0),
                         base[:, 3:], base[:, 4] - base[:, 5], base[:, 1]])
    keep = independent_columns(m, intercept=True)
    # reference: numpy's SVD rank; the kept columns span the same space and are independent
    assert keep.sum() == np.linalg.matrix_rank(m) == np.linalg.matrix_rank(m[:, keep])
    assert keep.tolist() == [True, True, True, True, False, False, True, True, True, False, False]


def test_fallback_warnings_print_as_one_line(monkeypatch) -> None:
    import warnings

    monkeypatch.setattr(warnings, "formatwarning", warnings.formatwarning)  # restored after the test
    mle.one_line_fallbacks()
    mle.one_line_fallbacks()  # idempotent
    text = "zinb horizon 2: zinb failed (ZINB: ...); fell back to nb"
    # what warnings.showwarning writes to stderr
    assert warnings.formatwarning(text, mle.ModelFallbackWarning, "x.py", 1) == f"  ! {text}\n"
    other = warnings.formatwarning("something else", RuntimeWarning, "x.py", 7)
    assert other.startswith("x.py:7: RuntimeWarning: something else")  # other warnings keep the standard format
