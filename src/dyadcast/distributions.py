"""Vectorised predictive distributions for counts: Poisson, NB2, zero-inflated NB, hurdle NB, any PMF.

Every model in `dyadcast.models` reports quantiles and P(arrivals > 0) through these helpers, so
they share one parametrisation and one treatment of the edge cases:

* NB2: Var(Y) = mu + alpha * mu**2. In scipy terms n = 1 / alpha and p = n / (n + mu).
* alpha <= `POISSON_ALPHA` is treated as Poisson (scipy's NB loses precision as n grows huge).
* mu == 0 means all mass at zero: every quantile is 0 and P(Y > 0) = 0.
* Quantiles are the smallest integer k with P(Y <= k) >= level (the usual discrete definition).

Shapes: `mu` (and `alpha`, `pi`, `p_positive` when given per row) broadcast to (n,); `levels` is a
sequence of k probabilities; quantile functions return float arrays of shape (n, k).
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
from scipy import optimize, special, stats

POISSON_ALPHA = 1e-8  # below this NB2 is numerically Poisson
ALPHA_BOUNDS = (1e-8, 1e3)


def _prepare(mu, *others) -> tuple[np.ndarray, ...]:  # noqa: ANN001 - array-likes
    arrays = np.broadcast_arrays(np.atleast_1d(np.asarray(mu, dtype=float)),
                                 *(np.atleast_1d(np.asarray(o, dtype=float)) for o in others))
    out = tuple(np.array(a, dtype=float).ravel() for a in arrays)
    if np.any(~np.isfinite(out[0])) or np.any(out[0] < 0):
        bad = int(np.flatnonzero(~np.isfinite(out[0]) | (out[0] < 0))[0])
        raise ValueError(f"mean mu must be finite and >= 0; row {bad} has mu={out[0][bad]!r}")
    return out


def _levels(levels: Sequence[float]) -> np.ndarray:
    lv = np.asarray(list(levels), dtype=float)
    if lv.ndim != 1 or np.any((lv <= 0) | (lv >= 1)):
        raise ValueError(f"quantile levels must lie strictly between 0 and 1, got {list(levels)}")
    return lv


def nb_params(mu, alpha) -> tuple[np.ndarray, np.ndarray]:  # noqa: ANN001
    """scipy `nbinom` (n, p) for NB2 mean mu and dispersion alpha."""
    mu, alpha = _prepare(mu, alpha)
    n = 1.0 / np.maximum(alpha, POISSON_ALPHA)
    return n, n / (n + mu)


def poisson_quantiles(mu, levels: Sequence[float]) -> np.ndarray:  # noqa: ANN001
    (mu,) = _prepare(mu)
    lv = _levels(levels)
    out = stats.poisson.ppf(lv[None, :], mu[:, None])
    out[mu == 0, :] = 0.0
    return out


def nbinom_quantiles(mu, alpha, levels: Sequence[float]) -> np.ndarray:  # noqa: ANN001
    mu, alpha = _prepare(mu, alpha)
    lv = _levels(levels)
    n, p = nb_params(mu, alpha)
    out = stats.nbinom.ppf(lv[None, :], n[:, None], p[:, None])
    pois = alpha <= POISSON_ALPHA
    if pois.any():
        out[pois] = stats.poisson.ppf(lv[None, :], mu[pois, None])
    out[mu == 0, :] = 0.0
    return out


def poisson_p_positive(mu) -> np.ndarray:  # noqa: ANN001
    (mu,) = _prepare(mu)
    return -np.expm1(-mu)


def nbinom_p_zero(mu, alpha) -> np.ndarray:  # noqa: ANN001
    """P(Y = 0) = (1 + alpha mu)^(-1/alpha), computed in logs so tiny alpha stays accurate."""
    mu, alpha = _prepare(mu, alpha)
    a = np.maximum(alpha, POISSON_ALPHA)
    return np.where(alpha <= POISSON_ALPHA, np.exp(-mu), np.exp(-np.log1p(a * mu) / a))


def nbinom_p_positive(mu, alpha) -> np.ndarray:  # noqa: ANN001
    return 1.0 - nbinom_p_zero(mu, alpha)


def nbinom_logpmf(y, mu, alpha) -> np.ndarray:  # noqa: ANN001
    """NB2 log-likelihood per observation; rows with mu == 0 give 0 if y == 0 and -inf otherwise."""
    mu, alpha, y = _prepare(mu, alpha, y)
    n = 1.0 / np.maximum(alpha, POISSON_ALPHA)
    with np.errstate(divide="ignore", invalid="ignore"):
        ll = (special.gammaln(y + n) - special.gammaln(n) - special.gammaln(y + 1)
              + n * (np.log(n) - np.log(n + mu)) + special.xlogy(y, mu) - y * np.log(n + mu))
    return np.where(mu == 0, np.where(y == 0, 0.0, -np.inf), ll)


def _shifted_diff(f, y: np.ndarray, theta: np.ndarray, uniq: tuple[np.ndarray, np.ndarray] | None  # noqa: ANN001
                  ) -> np.ndarray:
    """f(y + theta) - f(theta) per row; once per distinct y when theta is one value (it always is here).

    Why: the gamma-family functions (trigamma above all) cost ~0.6 us per element; counts repeat a lot.
    """
    if uniq is not None and theta.size and np.all(theta == theta[0]):
        values, inverse = uniq
        t = theta[0]
        return (f(values + t) - f(t))[inverse]
    return f(y + theta) - f(theta)


def _trigamma(x: np.ndarray) -> np.ndarray:
    return special.polygamma(1, x)


def nb2_loglike_parts(y: np.ndarray, eta: np.ndarray, tau: np.ndarray, log_y_factorial: np.ndarray, order: int = 2,
              uniq: tuple[np.ndarray, np.ndarray] | None = None
              ) -> tuple[np.ndarray, np.ndarray | None, np.ndarray | None]:
    """NB2 (mean mu = e^eta, Var = mu + alpha mu^2, alpha = e^tau): ll, d/d(eta, tau), d2/d(eta, tau)^2.

    Written with log1p(alpha mu) and theta = 1/alpha so that small alpha and large mu stay accurate. `uniq`
    (distinct y values and the inverse index) lets the gamma-family functions run once per distinct count.
    """
    mu, a = np.exp(eta), np.exp(tau)
    theta = 1.0 / a
    amu = a * mu
    l1p = np.log1p(amu)
    ll = _shifted_diff(special.gammaln, y, theta, uniq) - log_y_factorial - theta * l1p + y * (tau + eta - l1p)
    if order == 0:
        return ll, None, None
    d = 1.0 + amu
    dpsi = _shifted_diff(special.digamma, y, theta, uniq)
    g = np.empty((y.size, 2))
    g[:, 0] = (y - mu) / d
    g[:, 1] = -theta * dpsi + theta * l1p + (y - mu) / d
    if order == 1:
        return ll, g, None
    h = np.empty((y.size, 2, 2))
    h[:, 0, 0] = -mu * (1.0 + a * y) / d**2
    h[:, 0, 1] = h[:, 1, 0] = -(y - mu) * amu / d**2
    dtri = _shifted_diff(_trigamma, y, theta, uniq)
    h[:, 1, 1] = (theta * dpsi + theta**2 * dtri - theta * l1p + mu / d - (y - mu) * amu / d**2)
    return ll, g, h


def fit_nb_alpha(y, mu, weights=None, fallback: float = 1.0, start: float | None = None) -> float:  # noqa: ANN001
    """Maximum-likelihood NB2 dispersion given fixed means (Newton on log alpha, bounded search as backup).

    Why: mean models (Poisson GLM, PPML, baselines, GBMs) do not estimate dispersion, and Poisson
    intervals are far too narrow for these counts. Rows with mu <= 0 or non-finite values are
    ignored. When alpha is not identifiable (no positive y, or fewer than 2 usable rows) `fallback`
    is returned; under-dispersed data give the lower bound (numerically Poisson). `start` (e.g. last
    month's alpha) only changes how fast the search ends, not where.
    """
    y = np.asarray(y, dtype=float).ravel()
    mu = np.asarray(mu, dtype=float).ravel()
    w = np.ones_like(y) if weights is None else np.asarray(weights, dtype=float).ravel()
    if not (y.shape == mu.shape == w.shape):
        raise ValueError(f"fit_nb_alpha: y, mu, weights must have equal length, "
                         f"got {y.size}, {mu.size}, {w.size}")
    keep = np.isfinite(y) & np.isfinite(mu) & (mu > 0) & np.isfinite(w) & (w > 0)
    y, mu, w = y[keep], mu[keep], w[keep]
    if y.size < 2 or not np.any(y > 0):
        return float(fallback)
    lo, hi = np.log(ALPHA_BOUNDS[0]), np.log(ALPHA_BOUNDS[1])
    eta, log_fact = np.log(mu), special.gammaln(y + 1.0)
    values, inverse = np.unique(y, return_inverse=True)
    uniq = (values, inverse.ravel())

    def parts(log_alpha: float, order: int) -> tuple[float, float, float]:
        with np.errstate(all="ignore"):
            ll, g, h = nb2_loglike_parts(y, eta, np.full(y.size, log_alpha), log_fact, order, uniq)
        if order == 0:
            return float(np.sum(w * ll)), 0.0, 0.0
        return float(np.sum(w * ll)), float(np.sum(w * g[:, 1])), float(np.sum(w * h[:, 1, 1]))

    def negll(log_alpha: float) -> float:
        return -parts(log_alpha, 0)[0]

    best = _newton_log_alpha(parts, lo, hi, start)
    if best is None:
        res = optimize.minimize_scalar(negll, bounds=(lo, hi), method="bounded", options={"xatol": 1e-4})
        best = float(res.x)
    # a search can miss a boundary optimum; compare with the ends explicitly
    for end in (lo, hi):
        if negll(end) < negll(best):
            best = end
    return float(np.exp(best))


def _newton_log_alpha(parts, lo: float, hi: float, start: float | None) -> float | None:  # noqa: ANN001
    """Safeguarded Newton on log alpha within [lo, hi]; None when it does not settle (caller searches)."""
    x = float(np.clip(np.log(start), lo, hi)) if start and start > 0 else 0.0
    ll, g, h = parts(x, 2)
    for _ in range(60):
        step = -g / h if h < 0 else np.sign(g) * 1.0  # not concave here: move uphill by one unit
        step = float(np.clip(step, -3.0, 3.0))
        for _ in range(30):
            candidate = float(np.clip(x + step, lo, hi))
            new = parts(candidate, 2)
            if np.isfinite(new[0]) and new[0] >= ll - 1e-12 * (1.0 + abs(ll)):
                break
            step /= 2.0
        else:
            return None
        moved = abs(candidate - x)
        x, (ll, g, h) = candidate, new
        if moved < 1e-8 or (x in (lo, hi) and np.sign(g) == (1 if x == hi else -1)):
            return x
    return None


def zinb_quantiles(mu, alpha, pi, levels: Sequence[float]) -> np.ndarray:  # noqa: ANN001
    """Zero-inflated NB2: P(Y <= k) = pi + (1 - pi) F_NB(k); `mu` is the NB (count-part) mean."""
    mu, alpha, pi = _prepare(mu, alpha, pi)
    lv = _levels(levels)
    pi = np.clip(pi, 0.0, 1.0)
    inner = (lv[None, :] - pi[:, None]) / np.maximum(1.0 - pi[:, None], 1e-300)
    out = np.zeros((mu.size, lv.size))
    need = inner > 0
    if need.any():
        rows = np.nonzero(need)[0]
        n, p = nb_params(mu[rows], alpha[rows])
        q = stats.nbinom.ppf(np.clip(inner[need], 0.0, 1.0 - 1e-15), n, p)
        pois = alpha[rows] <= POISSON_ALPHA
        if pois.any():
            q[pois] = stats.poisson.ppf(np.clip(inner[need][pois], 0.0, 1.0 - 1e-15), mu[rows][pois])
        out[need] = q
    out[mu == 0, :] = 0.0
    return out


def zinb_p_positive(mu, alpha, pi) -> np.ndarray:  # noqa: ANN001
    mu, alpha, pi = _prepare(mu, alpha, pi)
    return (1.0 - np.clip(pi, 0.0, 1.0)) * nbinom_p_positive(mu, alpha)


def hurdle_nb_quantiles(p_positive, mu, alpha, levels: Sequence[float]) -> np.ndarray:  # noqa: ANN001
    """Hurdle: P(Y > 0) = p_positive; positives follow a zero-truncated NB2 with untruncated mean mu."""
    mu, alpha, pp = _prepare(mu, alpha, p_positive)
    lv = _levels(levels)
    pp = np.clip(pp, 0.0, 1.0)
    f0 = nbinom_p_zero(mu, alpha)
    # P(Y <= k) = (1 - pp) + pp (F(k) - F(0)) / (1 - F(0)) for k >= 1
    cond = (lv[None, :] - (1.0 - pp[:, None])) / np.maximum(pp[:, None], 1e-300)
    target = f0[:, None] + (1.0 - f0[:, None]) * cond
    out = np.zeros((mu.size, lv.size))
    need = (cond > 0) & (mu[:, None] > 0)
    if need.any():
        rows = np.nonzero(need)[0]
        n, p = nb_params(mu[rows], alpha[rows])
        q = stats.nbinom.ppf(np.clip(target[need], 0.0, 1.0 - 1e-15), n, p)
        pois = alpha[rows] <= POISSON_ALPHA
        if pois.any():
            q[pois] = stats.poisson.ppf(np.clip(target[need][pois], 0.0, 1.0 - 1e-15), mu[rows][pois])
        out[need] = np.maximum(q, 1.0)
    # mu == 0 with p_positive > 0 is a degenerate truncated NB; its limit is all positives at 1
    degenerate = (cond > 0) & (mu[:, None] == 0)
    out[degenerate] = 1.0
    return out


def quantiles_from_pmf(pmf, levels: Sequence[float], support=None) -> np.ndarray:  # noqa: ANN001
    """Quantiles from an (n, K) probability matrix over `support` (default 0..K-1).

    Where the listed mass does not reach a level (tail beyond K-1) the result is NaN, so the caller
    sees that its `y_values` grid was too short instead of getting a silently truncated quantile.
    """
    pmf = np.atleast_2d(np.asarray(pmf, dtype=float))
    lv = _levels(levels)
    sup = np.arange(pmf.shape[1], dtype=float) if support is None else np.asarray(support, dtype=float)
    if sup.size != pmf.shape[1]:
        raise ValueError(f"support has {sup.size} values but pmf has {pmf.shape[1]} columns")
    cdf = np.cumsum(np.clip(pmf, 0.0, None), axis=1)
    out = np.empty((pmf.shape[0], lv.size))
    for j, level in enumerate(lv):
        reached = cdf >= level - 1e-12
        idx = reached.argmax(axis=1)
        out[:, j] = np.where(reached.any(axis=1), sup[idx], np.nan)
    return out


def nb_sample(mu, alpha, size: int, rng: np.random.Generator) -> np.ndarray:  # noqa: ANN001
    """(n, size) NB2 draws as a gamma-Poisson mixture; mu == 0 rows draw zeros; tiny alpha draws Poisson."""
    mu, alpha = _prepare(mu, alpha)
    a = np.maximum(alpha, POISSON_ALPHA)[:, None]
    shape = 1.0 / a
    lam = rng.gamma(shape, a * mu[:, None], size=(mu.size, size))
    pois = alpha <= POISSON_ALPHA
    lam[pois] = mu[pois, None]
    return rng.poisson(lam).astype(float)


def nb_mixture_sample(mu, alpha, pi, size: int, rng: np.random.Generator) -> np.ndarray:  # noqa: ANN001
    """Draws from a zero-inflated NB2 (pi = structural-zero probability); pi = 0 gives plain NB."""
    mu, alpha, pi = _prepare(mu, alpha, pi)
    draws = nb_sample(mu, alpha, size, rng)
    draws[rng.random(draws.shape) < np.clip(pi, 0.0, 1.0)[:, None]] = 0.0
    return draws
