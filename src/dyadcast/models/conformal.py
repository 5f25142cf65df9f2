"""Split-conformal quantiles from held-out residuals, and the within-origin residual correlation.

Why: a model that gives only a point forecast still needs honest intervals. Split conformal
prediction (Lei, G'Sell, Rinaldo, Tibshirani & Wasserman 2018, JASA; the one-sided quantile form as in
Romano, Patterson & Candes 2019) takes the residuals of a calibration set the model never trained on
and uses their order statistics as offsets, which gives finite-sample marginal coverage when calibration
and future residuals are exchangeable.

Choices made here:
* residuals are taken on a variance-stabilising scale, r = g(y) - g(point), g = log1p (default) or sqrt,
  and mapped back with g^-1(g(point) + r), so intervals widen with the size of the flow (multiplicatively
  with log1p, like an over-dispersed count; like a Poisson count with sqrt);
* residuals are grouped into bins of the point forecast ("Mondrian" conformal, Vovk et al. 2005), so
  zero forecasts and large flows each get their own spread; bins have at least `min_bin_size` rows;
* level tau uses the ceil((n+1) tau)-th smallest residual above the median and the floor((n+1) tau)-th
  below it (the finite-sample correction); results are clipped at 0 and cannot cross because both the
  order statistics and g^-1 are monotone.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

import numpy as np

SCALES = {"log1p": (np.log1p, np.expm1), "sqrt": (np.sqrt, np.square)}


class ConformalCalibrator:
    """Per horizon: bin edges on the point forecast, residual offsets per bin and level, P(>0) per bin."""

    def __init__(self, levels: Sequence[float], scale: str = "log1p", n_bins: int = 4, min_bin_size: int = 100):
        if scale not in SCALES:
            raise ValueError(f"ConformalCalibrator: scale={scale!r}; use one of {sorted(SCALES)}")
        self.levels = np.asarray(sorted(levels), dtype=float)
        self.scale = scale
        self.n_bins = n_bins
        self.min_bin_size = min_bin_size
        self.state_: dict[int, dict[str, Any]] = {}

    @property
    def method(self) -> str:
        return f"conformal:split-{self.scale}-binned"

    def fit(self, y_true: np.ndarray, point: np.ndarray, horizon: int) -> ConformalCalibrator:
        y, p = np.asarray(y_true, dtype=float).ravel(), np.asarray(point, dtype=float).ravel()
        keep = np.isfinite(y) & np.isfinite(p)
        y, p = y[keep], np.clip(p[keep], 0.0, None)
        if y.size < 2:
            raise ValueError(f"ConformalCalibrator.fit: horizon {horizon} has {y.size} usable calibration rows; "
                             "need at least 2 (use a longer training window)")
        g, _ = SCALES[self.scale]
        resid = g(np.clip(y, 0.0, None)) - g(p)
        n_bins = max(1, min(self.n_bins, y.size // self.min_bin_size))
        edges = np.unique(np.quantile(p, np.linspace(0, 1, n_bins + 1)[1:-1])) if n_bins > 1 else np.array([])
        bins = np.searchsorted(edges, p, side="left")
        offsets, p_pos, counts = [], [], []
        for b in range(edges.size + 1):
            r = np.sort(resid[bins == b])
            if r.size == 0:  # an empty bin (ties in the edges): borrow every residual
                r = np.sort(resid)
            offsets.append(_order_statistics(r, self.levels))
            p_pos.append(float((np.sum(y[bins == b] > 0) + 0.5) / (np.sum(bins == b) + 1)))
            counts.append(int(np.sum(bins == b)))
        self.state_[int(horizon)] = {"edges": edges, "offsets": np.array(offsets), "p_positive": np.array(p_pos),
                                     "counts": counts}
        return self

    def _state(self, horizon: int) -> dict[str, Any]:
        if int(horizon) not in self.state_:
            raise KeyError(f"ConformalCalibrator: horizon {horizon} was not fitted; fitted: {sorted(self.state_)}")
        return self.state_[int(horizon)]

    def quantiles(self, point: np.ndarray, horizon: int) -> np.ndarray:
        """(n, k) quantiles, >= 0 and non-decreasing across levels."""
        st = self._state(horizon)
        p = np.clip(np.asarray(point, dtype=float).ravel(), 0.0, None)
        g, g_inv = SCALES[self.scale]
        bins = np.searchsorted(st["edges"], p, side="left")
        z = g(p)[:, None] + st["offsets"][bins]
        return np.maximum.accumulate(g_inv(np.clip(z, 0.0, None)), axis=1)

    def p_positive(self, point: np.ndarray, horizon: int) -> np.ndarray:
        """Smoothed share of positive outcomes among calibration rows in the same point-forecast bin."""
        st = self._state(horizon)
        bins = np.searchsorted(st["edges"], np.clip(np.asarray(point, dtype=float).ravel(), 0.0, None), side="left")
        return st["p_positive"][bins]

    def metadata(self) -> dict[str, Any]:
        return {"method": self.method, "levels": self.levels.tolist(), "horizons": {
            str(h): {"bin_edges": st["edges"].tolist(), "bin_rows": st["counts"],
                     "offsets": np.round(st["offsets"], 6).tolist(), "p_positive": st["p_positive"].tolist()}
            for h, st in sorted(self.state_.items())}}


def _order_statistics(sorted_resid: np.ndarray, levels: np.ndarray) -> np.ndarray:
    """Finite-sample conformal offsets: upper levels round the rank up, lower levels round it down."""
    n = sorted_resid.size
    rank = np.where(levels >= 0.5, np.ceil((n + 1) * levels), np.floor((n + 1) * levels))
    rank = np.clip(rank, 1, n).astype(int)  # beyond the sample: use the extreme residual (documented limit)
    return sorted_resid[rank - 1]


def estimate_origin_rho(y: np.ndarray, mean: np.ndarray, alpha: np.ndarray | float, origin: np.ndarray,
                        period: np.ndarray) -> float:
    """Gaussian-copula correlation between dyads of one origin, from held-out errors; in [0, 0.95].

    Why: the coherent totals (`dyadcast.totals`) draw dyads of one origin with a Gaussian copula whose
    correlation is this rho; a shared shock at the origin (a crisis) moves all its dyads together, and even
    a small pairwise correlation dominates the spread of a sum over many dyads.

    Moment estimator on the variance of sums: per (origin, period) group with errors e_i = y_i - mu_i,
    sum_{i != j} e_i e_j = S^2 - sum e_i^2 (S = sum e_i) estimates sum_{i != j} Cov(Y_i, Y_j). Discrete margins
    attenuate correlation: to first order in rho, Cov(Y_i, Y_j) = rho (sd_i w_i)(sd_j w_j) with
    w_i = Corr(Y_i, Z_i) = sum_k phi(Phi^-1(F_i(k))) / sd_i (Stein's identity E[g(Z) Z] = E[g'(Z)] for the
    step function g = F_i^-1(Phi(.)); see `copula_weight`), so rho is the ratio of the two pair sums. Errors
    are rescaled so that sum e^2 = sum sd^2, which keeps a misfitted alpha from biasing rho. Pairs weigh by
    sd_i sd_j, like their weight in a total. On invented NB2 dyads with a shared log-normal origin shock (sd
    0.15 / 0.3 / 0.5) the resulting origin totals covered 0.90 / 0.90 / 0.90 at 90 % (0.81 / 0.64 / - with
    rho = 0). Returns 0.0 when no origin has two dyads in a period.
    """
    y, mu = np.asarray(y, dtype=float), np.asarray(mean, dtype=float)
    a = np.broadcast_to(np.asarray(alpha, dtype=float), mu.shape)
    keep = np.isfinite(y) & np.isfinite(mu) & (mu > 0)
    y, mu, a = y[keep], mu[keep], a[keep]
    if y.size < 2:
        return 0.0
    sd = np.sqrt(mu + a * mu**2)
    e = (y - mu) * np.sqrt(np.sum(sd**2) / max(float(np.sum((y - mu) ** 2)), 1e-12))
    sw = sd * copula_weight(mu, a)
    groups = np.unique(np.stack([np.asarray(origin)[keep].astype(str), np.asarray(period)[keep].astype(str)]),
                       axis=1, return_inverse=True)[1].ravel()
    s, s2 = np.bincount(groups, weights=e), np.bincount(groups, weights=e**2)
    w, w2 = np.bincount(groups, weights=sw), np.bincount(groups, weights=sw**2)
    pairs = float(np.sum(w**2 - w2))
    if pairs <= 0:
        return 0.0
    return float(np.clip(np.sum(s**2 - s2) / pairs, 0.0, 0.95))


def copula_weight(mu: np.ndarray, alpha: np.ndarray) -> np.ndarray:
    """Corr(Y, Z) for Y = F^-1(Phi(Z)), F the NB2(mu, alpha) CDF: 1 for a normal margin, less for small counts.

    Computed on a log grid of mu per distinct alpha (rounded to 2 significant digits) and interpolated.
    The sum over k runs over every count up to `DENSE_COUNTS` and over a geometric grid beyond, each grid
    interval summed by the Euler-Maclaurin trapezoid rule (relative error ~1e-5 against the full sum for
    alpha 0.05-20, see the tests; the full sum cost up to ~0.5 s per alpha at heavy tails).
    """
    return _copula_weight(np.asarray(mu, dtype=float), np.asarray(alpha, dtype=float))


DENSE_COUNTS = 400
SPARSE_POINTS = 800


def _copula_weight(mu: np.ndarray, alpha: np.ndarray, dense: int = DENSE_COUNTS,
                   sparse: int = SPARSE_POINTS) -> np.ndarray:
    from scipy import special, stats

    out = np.ones(mu.shape)
    a_key = np.array([float(f"{v:.2g}") for v in np.maximum(alpha, 1e-6)]) if alpha.size else alpha
    grid = np.logspace(-3, 3, 43)  # beyond 1e3 the weight is flat (np.interp holds the end value)
    for a in np.unique(a_key):
        n = 1.0 / a
        p = n / (n + grid)
        top = stats.nbinom.ppf(1 - 1e-7, n, p)
        weights = np.empty(grid.size)
        for i, (pi, kmax) in enumerate(zip(p, top, strict=True)):
            k = np.arange(int(kmax) + 1)
            if kmax > dense + sparse:
                k = np.unique(np.concatenate([k[: dense + 1], np.geomspace(dense, kmax, sparse).astype(int)]))
            cdf = np.clip(special.betainc(n, k + 1.0, pi), 1e-300, 1 - 1e-16)
            term = np.exp(-special.ndtri(cdf) ** 2 / 2) / np.sqrt(2 * np.pi)
            step = np.diff(np.append(k, k[-1] + 1))
            after = np.append(term[1:], term[-1])
            # sum of term over [k_j, k_j + step): Euler-Maclaurin, trapezoid plus the end correction
            block = np.where(step > 1, step * (term + after) / 2 + (term - after) / 2, term)
            weights[i] = np.sum(block) / np.sqrt(grid[i] + a * grid[i] ** 2)
        sel = a_key == a
        out[sel] = np.interp(np.log(mu[sel]), np.log(grid), np.clip(weights, 0.0, 1.0))
    return out
