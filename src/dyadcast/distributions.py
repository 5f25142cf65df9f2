"""Vectorised predictive distributions for counts: Poisson, NB2, zero-inflated NB, hurdle NB, any PMF.

Every model in `dyadcast.models` reports quantiles and P(arrivals > 0) through these helpers, so
they share one parametrisation and one treatment of the edge cases:

* NB2: Var(Y) = mu + alpha * mu**2. In scipy terms n = 1 / alpha and p = n / (n + mu).
* alpha <= `POISSON_ALPHA` is treated as Poisson (scipy's NB loses precision as n grows huge).
* mu == 0 means all mass at zero: every quantile is 0 and P(Y > 0) = 0.
* Quantiles are the smallest integer k with P(Y <= k) >= level (the usual discrete definition).

Shapes: `mu` (and `alpha`, `pi`, `p_positive` when given per row) broadcast to (n,); `levels` is a
sequence of k probabilities; quantile functions return float arrays of shape (n, k).

The last section goes the other way: `fit_hurdle_nb` reads reported rows back as hurdle NB distributions.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import pandas as pd
from scipy import optimize, special, stats

POISSON_ALPHA = 1e-8  # below this NB2 is numerically Poisson
ALPHA_BOUNDS = (1e-8, 1e3)
ALPHA_GRID = np.logspace(-4, 2, 31)  # fit_hurdle_nb's candidates, ratio 1.58 between neighbours


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


# --- reading reported rows back as hurdle NB distributions -------------------------------------------

def fit_hurdle_nb(mean: np.ndarray, p_positive: np.ndarray, q: np.ndarray, levels: Sequence[float],
                  block: int = 4000) -> tuple[np.ndarray, np.ndarray]:
    """Read forecast rows (mean, p_positive, quantiles at `levels`) back as hurdle NB2 distributions: (m, alpha).

    The reading: 0 with probability 1 - p_positive, else a zero-truncated NB2(m, alpha) whose mean makes the
    row's mean exact (m solves m / (1 - P0) = mean / p). Rows an NB model wrote are recovered exactly (alpha
    from P(0), m = mean); for the others alpha is the point of ALPHA_GRID (refined between neighbours) whose
    CDF best brackets the quantiles. A row with mean 0 but p_positive > 0 gets m -> 0: positives at 1.
    Identical rows share one fit. Used by `dyadcast.totals` to draw dyads jointly.
    """
    p = np.clip(np.asarray(p_positive, dtype=float), 0.0, 1.0)
    key = np.column_stack([np.asarray(mean, dtype=float), p, np.asarray(q, dtype=float)])
    first, inverse = _distinct_rows(key)
    mu, p, q = key[first, 0], key[first, 1], key[first, 2:]
    tau = np.asarray(levels, dtype=float)
    # a plain NB row: the alpha that reproduces P(0) from the mean keeps m = mean exactly; rows whose
    # quantiles it brackets perfectly (every row made by an NB model) need no grid search
    m_out, a_out = mu.copy(), _nb_alpha_from_p0(mu, p)
    loss_ex = np.full(mu.size, np.inf)
    ok = np.flatnonzero(np.isfinite(a_out))
    if ok.size:
        loss_ex[ok] = _loss(mu[ok, None], a_out[ok, None], p[ok], q[ok], tau[None, None, :])[:, 0]
    todo = np.flatnonzero(loss_ex > 1e-9)
    for start in range(0, todo.size, block):  # bounded memory: block x grid x levels cells at a time
        rows = todo[start:start + block]
        m_out[rows], a_out[rows] = _grid_fit(mu[rows], p[rows], q[rows], tau, loss_ex[rows], a_out[rows])
    return m_out[inverse], a_out[inverse]


def _distinct_rows(key: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(one row index per distinct row, inverse), rows compared bit for bit.

    Why a hash: np.unique(axis=0) sorts rows as structured values, ~15x slower at 240,000 rows. A collision
    (two different rows with one hash) is detected and falls back to np.unique.
    """
    bits = np.ascontiguousarray(key).view(np.uint64)
    digest = np.zeros(key.shape[0], np.uint64)
    for j in range(bits.shape[1]):
        digest ^= bits[:, j]
        digest *= np.uint64(0x100000001B3)  # FNV-1a prime, wrapping
    codes, uniques = pd.factorize(digest)
    first = np.empty(len(uniques), np.int64)
    first[codes[::-1]] = np.arange(codes.size - 1, -1, -1)
    if not (bits[first[codes]] == bits).all():
        _, first, codes = np.unique(bits, axis=0, return_index=True, return_inverse=True)
    return first, np.asarray(codes).ravel()


def _grid_fit(mu: np.ndarray, p: np.ndarray, q: np.ndarray, tau: np.ndarray, loss_ex: np.ndarray,
              alpha_ex: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Rows the NB reading does not reproduce: the alpha of ALPHA_GRID (then refined) whose hurdle CDF best
    brackets the quantiles, unless the NB reading (alpha_ex, loss loss_ex) is as good."""
    tau = tau[None, None, :]
    cond_mean = np.maximum(np.where(p > 0, mu / np.maximum(p, 1e-300), 1.0), 1.0)[:, None]
    alphas = np.broadcast_to(ALPHA_GRID[None, :], (mu.size, ALPHA_GRID.size))
    m, loss = _grid_loss(cond_mean, alphas, p, q, tau)
    # ties (e.g. all quantiles 0): take the grid point nearest the middle of the tied range. Where m -> 0
    # (conditional mean 1: positives at 1) alpha has no effect and every grid point is a tie; the losses
    # there differ only by rounding (1e-8)
    grid = np.arange(ALPHA_GRID.size)[None, :]
    tied = (loss <= loss.min(axis=1, keepdims=True) + 1e-9) | (cond_mean <= 1.0)
    centre = (tied * grid).sum(axis=1) / tied.sum(axis=1)
    pick = np.argmin(np.where(tied, np.abs(grid - centre[:, None]), np.inf), axis=1)
    rows = np.arange(mu.size)
    best_m, best_a, best = m[rows, pick], alphas[rows, pick].copy(), loss[rows, pick]
    # a unique best grid point: refine between its neighbours (9 points, ratio ~1.12)
    sharp = np.flatnonzero(tied.sum(axis=1) == 1)
    if sharp.size:
        step = np.log(ALPHA_GRID[1] / ALPHA_GRID[0])
        fine = best_a[sharp, None] * np.exp(np.linspace(-step, step, 9))[None, :]
        m_f, loss_f = _grid_loss(cond_mean[sharp], fine, p[sharp], q[sharp], tau)
        j = loss_f.argmin(axis=1)
        r = np.arange(sharp.size)
        better = loss_f[r, j] < best[sharp] - 1e-12
        idx = sharp[better]
        best_m[idx], best_a[idx], best[idx] = m_f[r, j][better], fine[r, j][better], loss_f[r, j][better]
    grid_wins = best < loss_ex - 1e-9  # else the exact NB reading is as good: keep it
    return np.where(grid_wins, best_m, mu), np.where(grid_wins, best_a, alpha_ex)


def _grid_loss(cond_mean: np.ndarray, alphas: np.ndarray, p: np.ndarray, q: np.ndarray, tau: np.ndarray
               ) -> tuple[np.ndarray, np.ndarray]:
    """For candidate alphas (u, G): the m matching each row's conditional mean, and the quantile loss."""
    m = _truncated_nb_m(cond_mean, alphas)
    return m, _loss(m, alphas, p, q, tau)


def _loss(m: np.ndarray, alpha: np.ndarray, p: np.ndarray, q: np.ndarray, tau: np.ndarray) -> np.ndarray:
    """Sum over levels of how far each level lies outside [F(q-1), F(q)] (0: the quantiles are reproduced)."""
    levels = q.shape[1]
    cdf = _hurdle_cdf(np.concatenate([np.ceil(q) - 1, np.floor(q)], axis=1)[:, None, :], p, m, alpha)
    lower, upper = cdf[:, :, :levels], cdf[:, :, levels:]
    return np.maximum(0.0, np.maximum(lower - tau, tau - upper)).sum(axis=2)


def _nb_alpha_from_p0(mu: np.ndarray, p: np.ndarray, halvings: int = 12, newton: int = 4) -> np.ndarray:
    """alpha with (1 + alpha mu)^(-1/alpha) = 1 - p; NaN where no NB has that P(0) (or mu, p is 0).

    g(t) = log(log1p(e^t mu) / e^t) - log c falls and is concave in t = log alpha: bisection over
    [1e-8, 1e4] narrows t to 0.007, then Newton from the bracket's upper end converges without overshooting
    (the tangent of a concave falling function meets zero between the point and the root).
    """
    with np.errstate(divide="ignore", invalid="ignore"):
        c = -np.log1p(-np.clip(p, 0.0, 1.0 - 1e-15))  # log1p(alpha mu) / alpha must equal c, in (0, mu)
    feasible = (mu > 0) & (p > 0) & (c < mu * (1 - 1e-9))
    lo, hi = np.full(mu.shape, np.log(1e-8)), np.full(mu.shape, np.log(1e4))
    for _ in range(halvings):
        mid = (lo + hi) / 2
        a = np.exp(mid)
        too_dispersed = np.log1p(a * mu) / a < c  # h(alpha) decreases in alpha
        hi, lo = np.where(too_dispersed, mid, hi), np.where(too_dispersed, lo, mid)
    t = hi
    with np.errstate(divide="ignore", invalid="ignore"):
        log_c = np.log(c)
        for _ in range(newton):
            am = np.exp(t) * mu
            ell = np.log1p(am)
            g = np.log(ell) - t - log_c
            slope = am / ((1.0 + am) * ell) - 1.0
            t = np.clip(t - g / slope, lo, hi)
    return np.where(feasible, np.exp(t), np.nan)


def _p_zero(m: np.ndarray, alpha: np.ndarray) -> np.ndarray:
    return np.exp(-np.log1p(alpha * m) / alpha)


def _truncated_nb_m(target: np.ndarray, alpha: np.ndarray, halvings: int = 6, newton: int = 6) -> np.ndarray:
    """m with m / (1 - P0(m)) = target (>= 1); target 1 gives the limit m -> 0 (1e-9).

    g(t) = t - log(1 - P0(e^t)) - log(target) rises in t = log m: bisection over [1e-9, target] narrows t
    to ~0.4, safeguarded Newton steps (kept inside the bracket) finish it (relative error < 1e-12 for m > 1e-6).
    """
    target, alpha = np.broadcast_arrays(target, alpha)
    lo, hi = np.full(target.shape, np.log(1e-9)), np.log(np.maximum(target, 1e-9))
    for _ in range(halvings):
        mid = (lo + hi) / 2
        m = np.exp(mid)
        too_big = m / -np.expm1(-np.log1p(alpha * m) / alpha) > target
        hi, lo = np.where(too_big, mid, hi), np.where(too_big, lo, mid)
    t = (lo + hi) / 2
    log_target = np.log(target)
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        for _ in range(newton):
            m = np.exp(t)
            p0 = np.exp(-np.log1p(alpha * m) / alpha)
            tail = -np.expm1(-np.log1p(alpha * m) / alpha)
            g = t - np.log(tail) - log_target
            slope = 1.0 - m * p0 / ((1.0 + alpha * m) * tail)
            t = np.clip(np.where(np.isfinite(g / slope), t - g / slope, t), lo, hi)
    return np.exp(t)


def _hurdle_cdf(k: np.ndarray, p: np.ndarray, m: np.ndarray, alpha: np.ndarray) -> np.ndarray:
    """P(Y <= k) for k of shape (u, 1, L) against m and alpha of shape (u, G); k < 0 gives 0.

    The NB CDF comes from a pmf table (recurrence in logs) for rows whose largest count is small, which is
    most rows and ~50x cheaper than the incomplete beta there; from scipy's betainc for the others.
    """
    m = np.asarray(m, dtype=float)
    a = np.broadcast_to(alpha, m.shape)
    out = np.empty((m.shape[0], m.shape[1], k.shape[2]))
    top = k.max(axis=(1, 2))
    done = np.zeros(m.shape[0], bool)
    for width in (2, 4, 8, 16, 32, 64, 128, 256, 512):
        rows = np.flatnonzero(~done & (top < width))
        done[rows] = True
        for part in np.array_split(rows, max(1, rows.size * m.shape[1] * width // (1 << 22))):
            if part.size:
                out[part] = _table_cdf(k[part], m[part], a[part], width)
    rows = np.flatnonzero(~done)
    if rows.size:
        n = 1.0 / a[rows][:, :, None]
        out[rows] = special.betainc(n, np.maximum(k[rows], 0) + 1, n / (n + m[rows][:, :, None]))
    f0 = _p_zero(m, a)[:, :, None]
    positive_part = np.clip((out - f0) / np.maximum(1.0 - f0, 1e-300), 0.0, 1.0)
    p = p[:, None, None]
    return np.where(k < 0, 0.0, np.where(k < 1, 1.0 - p, 1.0 - p + p * positive_part))


def _table_cdf(k: np.ndarray, m: np.ndarray, alpha: np.ndarray, width: int) -> np.ndarray:
    """NB CDF at counts k (u, 1, L) in [0, width) for (m, alpha) of shape (u, G), by the pmf recurrence
    pmf(j) = pmf(j - 1) (j - 1 + n) / j * alpha m / (1 + alpha m)."""
    n = 1.0 / alpha
    fail = alpha * m / (1.0 + alpha * m)
    n_fail = n * fail
    cdf = np.empty((width, *m.shape))
    pmf = np.exp(-n * np.log1p(alpha * m))
    cdf[0] = pmf
    ratio = np.empty(m.shape)
    for j in range(1, width):  # in place: this loop is most of the grid reading's time
        np.multiply(fail, j - 1.0, out=ratio)
        ratio += n_fail
        pmf *= ratio
        pmf *= 1.0 / j
        np.add(cdf[j - 1], pmf, out=cdf[j])
    idx = np.broadcast_to(np.clip(k, 0, width - 1).astype(np.intp).transpose(2, 0, 1),
                          (k.shape[2], *m.shape))
    return np.take_along_axis(cdf, idx, axis=0).transpose(1, 2, 0)
