"""Origin, destination and world totals whose intervals agree with the dyad forecasts they add up.

Why not add dyad quantiles: the 95 % quantile of a sum is not the sum of 95 % quantiles (that would be
right only if every dyad moved in lock-step). Instead, per horizon:

1. each dyad's forecast row is read as a hurdle distribution: 0 with probability 1 - p_positive, else a
   zero-truncated NB2(m, alpha) whose mean makes the row's mean exact (m solves m / (1 - P0) = mean / p).
   alpha is picked from a grid so that the distribution's CDF best brackets the row's quantiles (rows of
   NB models are recovered as they are). A row with mean 0 but p_positive > 0 puts its positives at 1;
2. dyads are drawn jointly, `n_draws` times: a Gaussian copula with correlation `rho` between dyads of one
   origin (a shared shock: a crisis moves all of an origin's flows) and independence across origins;
   `dyadcast.models.conformal.estimate_origin_rho` estimates rho from held-out residuals;
3. draws are summed per origin, destination and world; quantiles and P(>0) come from the sums, P(>0)
   clipped to [max p_i, min(1, sum p_i)] (a sum is positive when any part is). The mean is the exact sum of
   the dyad means, not the sampled one.

Alternative not taken: MinT reconciliation (Wickramasuriya, Athanasopoulos & Hyndman 2019, JASA) adjusts
forecasts of every level to be coherent; it reconciles means and needs a covariance of the base forecast
errors of every total, which we would have to forecast separately. Here only dyads are forecast and every
total is derived from them, so coherence holds by construction.

Cost: the draws are made origin by origin in chunks of about `chunk_cells` dyad-draws, so memory stays
bounded at 40,000 dyads; random numbers come from one generator per (seed, horizon, origin), so the result
does not depend on the chunking. Inverse CDFs use per-dyad CDF tables, exact scipy `nbinom.ppf` beyond them.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np
import pandas as pd
from scipy import sparse, special, stats

from dyadcast.models.base import quantile_column

DEFAULT_RHO = 0.2  # judgement, no source: a moderate shared origin shock; prefer an estimate when one exists
ALPHA_GRID = np.logspace(-4, 2, 31)  # ratio 1.58 between neighbours
TABLE_WIDTHS = (16, 64, 256, 1024)  # CDF table sizes; dyads needing more go straight to nbinom.ppf
TOTAL_COLUMNS = ("level", "origin", "destination", "horizon", "target_month")


def aggregate_totals(dyad_forecast: pd.DataFrame, quantiles: Sequence[float], n_draws: int = 1000,
                     rho: float | Mapping[Any, float] | None = DEFAULT_RHO, seed: int = 0,
                     chunk_cells: int = 2_000_000) -> pd.DataFrame:
    """Rows for every origin total, destination total and the world total, per horizon and target month.

    `rho`: one within-origin copula correlation, or one per horizon ({h: rho}, keys int or str, e.g. a
    model's `fitted_state()["origin_rho"]`); None or a missing horizon uses DEFAULT_RHO.
    """
    levels = sorted(float(q) for q in quantiles)
    qcols = [quantile_column(q) for q in levels]
    frame = dyad_forecast
    if "level" in frame.columns:
        frame = frame[frame["level"] == "dyad"]
    missing = [c for c in ("origin", "destination", "horizon", "target_month", "mean", *qcols, "p_positive")
               if c not in frame.columns]
    if missing:
        raise ValueError(f"aggregate_totals: dyad forecast lacks columns {missing}; pass the models' predict() output")
    parts = [_one_target(group, levels, n_draws, _rho_for(rho, int(h)), seed, int(h), chunk_cells)
             for (h, _), group in frame.groupby(["horizon", "target_month"], sort=True)]
    if not parts:
        return pd.DataFrame(columns=[*TOTAL_COLUMNS, "mean", *qcols, "p_positive"])
    out = pd.concat(parts, ignore_index=True)
    out["horizon"] = out["horizon"].astype("int16")
    return out


def _rho_for(rho: float | Mapping[Any, float] | None, horizon: int) -> float:
    if isinstance(rho, Mapping):
        rho = rho.get(horizon, rho.get(str(horizon)))
    value = DEFAULT_RHO if rho is None else float(rho)
    if not 0.0 <= value < 1.0:
        raise ValueError(f"aggregate_totals: rho={value} for horizon {horizon} must lie in [0, 1)")
    return value


def fit_hurdle_nb(mean: np.ndarray, p_positive: np.ndarray, q: np.ndarray, levels: Sequence[float],
                  block: int = 4000) -> tuple[np.ndarray, np.ndarray]:
    """(m, alpha) per row of the hurdle reading described in the module docstring; identical rows share a fit."""
    p = np.clip(np.asarray(p_positive, dtype=float), 0.0, 1.0)
    key = np.column_stack([np.asarray(mean, dtype=float), p, np.asarray(q, dtype=float)])
    uniq, inverse = np.unique(key, axis=0, return_inverse=True)
    m_out, a_out = np.empty(uniq.shape[0]), np.empty(uniq.shape[0])
    for start in range(0, uniq.shape[0], block):  # bounded memory: block x grid x levels cells at a time
        sl = slice(start, start + block)
        m_out[sl], a_out[sl] = _fit_block(uniq[sl, 0], uniq[sl, 1], uniq[sl, 2:], levels)
    inverse = inverse.ravel()
    return m_out[inverse], a_out[inverse]


def _fit_block(mu: np.ndarray, p: np.ndarray, q: np.ndarray, levels: Sequence[float]) -> tuple[np.ndarray, np.ndarray]:
    tau = np.asarray(levels, dtype=float)[None, None, :]
    # a plain NB row: the alpha that reproduces P(0) from the mean keeps m = mean exactly; rows whose
    # quantiles it brackets perfectly (every row made by an NB model) need no grid search
    m_out, a_out = mu.copy(), _nb_alpha_from_p0(mu, p)
    loss_ex = np.full(mu.size, np.inf)
    ok = np.isfinite(a_out)
    if ok.any():
        loss_ex[ok] = _loss(mu[ok][:, None], a_out[ok][:, None], p[ok], q[ok], tau)[:, 0]
    todo = np.flatnonzero(loss_ex > 1e-9)
    if todo.size == 0:
        return m_out, a_out
    mu, p, q = mu[todo], p[todo], q[todo]
    cond_mean = np.maximum(np.where(p > 0, mu / np.maximum(p, 1e-300), 1.0), 1.0)[:, None]
    alphas = np.broadcast_to(ALPHA_GRID[None, :], (todo.size, ALPHA_GRID.size))
    m, loss = _grid_loss(cond_mean, alphas, p, q, tau)
    # ties (e.g. all quantiles 0): take the grid point nearest the middle of the tied range
    grid = np.arange(ALPHA_GRID.size)[None, :]
    tied = loss <= loss.min(axis=1, keepdims=True) + 1e-9
    centre = (tied * grid).sum(axis=1) / tied.sum(axis=1)
    pick = np.argmin(np.where(tied, np.abs(grid - centre[:, None]), np.inf), axis=1)
    rows = np.arange(todo.size)
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
    grid_wins = best < loss_ex[todo] - 1e-9  # else the exact NB reading is as good: keep it
    m_out[todo[grid_wins]], a_out[todo[grid_wins]] = best_m[grid_wins], best_a[grid_wins]
    return m_out, a_out


def _grid_loss(cond_mean: np.ndarray, alphas: np.ndarray, p: np.ndarray, q: np.ndarray, tau: np.ndarray
               ) -> tuple[np.ndarray, np.ndarray]:
    """For candidate alphas (u, G): the m matching each row's conditional mean, and the quantile loss."""
    m = _truncated_nb_m(cond_mean, alphas)
    return m, _loss(m, alphas, p, q, tau)


def _loss(m: np.ndarray, alpha: np.ndarray, p: np.ndarray, q: np.ndarray, tau: np.ndarray) -> np.ndarray:
    """Sum over levels of how far each level lies outside [F(q-1), F(q)] (0: the quantiles are reproduced)."""
    lower = _hurdle_cdf(np.ceil(q)[:, None, :] - 1, p, m, alpha)
    upper = _hurdle_cdf(np.floor(q)[:, None, :], p, m, alpha)
    return np.maximum(0.0, np.maximum(lower - tau, tau - upper)).sum(axis=2)


def _nb_alpha_from_p0(mu: np.ndarray, p: np.ndarray, iterations: int = 80) -> np.ndarray:
    """alpha with (1 + alpha mu)^(-1/alpha) = 1 - p; NaN where no NB has that P(0) (or mu, p is 0)."""
    with np.errstate(divide="ignore", invalid="ignore"):
        c = -np.log1p(-np.clip(p, 0.0, 1.0 - 1e-15))  # log1p(alpha mu) / alpha must equal c, in (0, mu)
    feasible = (mu > 0) & (p > 0) & (c < mu * (1 - 1e-9))
    lo, hi = np.full(mu.shape, np.log(1e-8)), np.full(mu.shape, np.log(1e4))
    for _ in range(iterations):
        mid = (lo + hi) / 2
        a = np.exp(mid)
        too_dispersed = np.log1p(a * mu) / a < c  # h(alpha) decreases in alpha
        hi, lo = np.where(too_dispersed, mid, hi), np.where(too_dispersed, lo, mid)
    return np.where(feasible, np.exp((lo + hi) / 2), np.nan)


def _p_zero(m: np.ndarray, alpha: np.ndarray) -> np.ndarray:
    return np.exp(-np.log1p(alpha * m) / alpha)


def _truncated_nb_m(target: np.ndarray, alpha: np.ndarray, iterations: int = 60) -> np.ndarray:
    """m with m / (1 - P0(m)) = target (>= 1), by bisection on log m; target 1 gives the limit m -> 0."""
    target, alpha = np.broadcast_arrays(target, alpha)
    lo, hi = np.full(target.shape, np.log(1e-9)), np.log(np.maximum(target, 1e-9))
    for _ in range(iterations):
        mid = (lo + hi) / 2
        m = np.exp(mid)
        too_big = m / -np.expm1(-np.log1p(alpha * m) / alpha) > target
        hi, lo = np.where(too_big, mid, hi), np.where(too_big, lo, mid)
    return np.exp((lo + hi) / 2)


def _hurdle_cdf(k: np.ndarray, p: np.ndarray, m: np.ndarray, alpha: np.ndarray) -> np.ndarray:
    """P(Y <= k) for k of shape (u, 1, L) against m and alpha of shape (u, G); k < 0 gives 0."""
    p, m, a = p[:, None, None], m[:, :, None], np.broadcast_to(alpha, m.shape)[:, :, None]
    n = 1.0 / a
    pp = n / (n + m)
    f0 = _p_zero(m, a)
    fk = special.betainc(n, np.maximum(k, 0) + 1, pp)
    positive_part = np.clip((fk - f0) / np.maximum(1.0 - f0, 1e-300), 0.0, 1.0)
    return np.where(k < 0, 0.0, np.where(k < 1, 1.0 - p, 1.0 - p + p * positive_part))


def _one_target(group: pd.DataFrame, levels: list[float], n_draws: int, rho: float, seed: int, horizon: int,
                chunk_cells: int) -> pd.DataFrame:
    g = group.sort_values(["origin", "destination"], kind="stable")
    qcols = [quantile_column(q) for q in levels]
    p = np.clip(g["p_positive"].to_numpy(dtype=float), 0.0, 1.0)
    m, alpha = fit_hurdle_nb(g["mean"].to_numpy(dtype=float), p, g[qcols].to_numpy(dtype=float), levels)
    origins, o_idx = np.unique(g["origin"].to_numpy().astype(str), return_inverse=True)
    dests, d_idx = np.unique(g["destination"].to_numpy().astype(str), return_inverse=True)
    starts = np.searchsorted(o_idx, np.arange(origins.size))
    bounds = np.append(starts, o_idx.size)
    o_sums, d_sums = np.zeros((origins.size, n_draws)), np.zeros((dests.size, n_draws))
    first = 0
    while first < origins.size:  # whole origins per chunk
        last = first + 1
        while last < origins.size and (bounds[last + 1] - bounds[first]) * n_draws <= chunk_cells:
            last += 1
        lo, hi = bounds[first], bounds[last]
        z = np.vstack([_origin_normals(bounds[o + 1] - bounds[o], n_draws, rho, seed, horizon, o)
                       for o in range(first, last)])
        y = _draw(z, p[lo:hi], m[lo:hi], alpha[lo:hi])
        o_sums[first:last] = np.add.reduceat(y, bounds[first:last] - lo, axis=0)
        spread = sparse.csr_matrix((np.ones(hi - lo), (d_idx[lo:hi], np.arange(hi - lo))), shape=(dests.size, hi - lo))
        d_sums += spread @ y
        first = last
    mean = g["mean"].to_numpy(dtype=float)
    specs = [("origin_total", origins, np.full(origins.size, "*"), o_sums,
              np.bincount(o_idx, weights=mean, minlength=origins.size), _p_bounds(p, o_idx, origins.size)),
             ("destination_total", np.full(dests.size, "*"), dests, d_sums,
              np.bincount(d_idx, weights=mean, minlength=dests.size), _p_bounds(p, d_idx, dests.size)),
             ("world_total", np.array(["*"]), np.array(["*"]), o_sums.sum(axis=0, keepdims=True),
              np.array([mean.sum()]), _p_bounds(p, np.zeros(p.size, int), 1))]
    frames = []
    for level, orig, dest, sums, total_mean, (p_lo, p_hi) in specs:
        out = pd.DataFrame({"level": level, "origin": orig, "destination": dest, "horizon": horizon,
                            "target_month": g["target_month"].iloc[0], "mean": total_mean})
        qs = np.quantile(sums, levels, axis=1, method="inverted_cdf").T
        for j, col in enumerate(qcols):
            out[col] = qs[:, j]
        out["p_positive"] = np.clip((sums > 0).mean(axis=1), p_lo, p_hi)
        frames.append(out)
    return pd.concat(frames, ignore_index=True)


def _p_bounds(p: np.ndarray, idx: np.ndarray, size: int) -> tuple[np.ndarray, np.ndarray]:
    high = np.zeros(size)
    np.maximum.at(high, idx, p)
    return high, np.minimum(1.0, np.bincount(idx, weights=p, minlength=size))


def _origin_normals(n: int, n_draws: int, rho: float, seed: int, horizon: int, origin: int) -> np.ndarray:
    """(n, n_draws) standard normals, equicorrelated rho; one generator per origin; float32 to halve memory."""
    rng = np.random.default_rng([seed, horizon, origin])
    z = rng.standard_normal((n + 1, n_draws), dtype=np.float32)
    z[1:] *= np.float32(np.sqrt(1.0 - rho))
    z[1:] += np.float32(np.sqrt(rho)) * z[0]
    return z[1:]


def _draw(z: np.ndarray, p: np.ndarray, m: np.ndarray, alpha: np.ndarray) -> np.ndarray:
    """Inverse-CDF draws of the hurdle NB rows for copula normals z (n, D); zero unless Phi(z) > 1 - p."""
    y = np.zeros(z.shape)  # float64: sums of large flows must stay exact integers
    with np.errstate(divide="ignore"):
        threshold = special.ndtri(1.0 - p).astype(np.float32)  # p = 0: +inf, never positive
    rows, cols = np.nonzero(z > threshold[:, None])
    if rows.size == 0:
        return y
    u = special.ndtr(z[rows, cols].astype(float))
    f0 = _p_zero(m, alpha)
    v = np.clip((u - (1.0 - p[rows])) / np.maximum(p[rows], 1e-300), 0.0, 1.0)
    level = np.clip(f0[rows] + v * (1.0 - f0[rows]), 0.0, 1.0 - 1e-12)
    n, pp = 1.0 / alpha, 1.0 / (1.0 + alpha * m)
    need = m + 12.0 * np.sqrt(m + alpha * m**2) + 5.0
    width_of = np.searchsorted(np.asarray(TABLE_WIDTHS), need)  # len(TABLE_WIDTHS): too big for a table
    value = np.full(rows.size, -1.0)
    for w_i, width in enumerate(TABLE_WIDTHS):
        members = np.flatnonzero(width_of == w_i)
        local = np.full(z.shape[0], -1)
        local[members] = np.arange(members.size)
        take = np.flatnonzero(local[rows] >= 0)
        if take.size == 0:
            continue
        cdf = _cdf_table(n[members], pp[members], width)
        r_loc = local[rows[take]]
        flat = (cdf + 3.0 * np.arange(members.size)[:, None]).ravel()  # rows stacked apart: one search
        j = np.searchsorted(flat, 3.0 * r_loc + level[take], side="left") - r_loc * width
        ok = j < width
        value[take[ok]] = j[ok]
    rest = np.flatnonzero(value < 0)
    if rest.size:
        value[rest] = _windowed_ppf(level[rest], rows[rest], n, pp)
    y[rows, cols] = np.maximum(value, 1.0)
    return y


def _windowed_ppf(level: np.ndarray, row: np.ndarray, n: np.ndarray, pp: np.ndarray,
                  max_window: int = 1 << 17) -> np.ndarray:
    """NB quantiles for large-mean rows: a CDF table over just the window of counts the levels fall in.

    Why: scipy's `nbinom.ppf` inverts the CDF iteratively per value (~5 us each), and a dyad with a mean in
    the thousands gets hundreds of draws per horizon; the table from 0 would be too wide. Per row, the
    window runs from ppf(lowest level) to ppf(highest level) (two exact scipy calls), its CDF starts from
    the exact CDF below the window and adds pmf terms by recurrence. Values the table cannot place (rounding
    at the window's end, or windows wider than `max_window`) use scipy exactly.
    """
    out = np.full(level.size, -1.0)
    order = np.argsort(row, kind="stable")
    groups = np.split(order, np.flatnonzero(np.diff(row[order])) + 1)
    rows = np.array([row[g[0]] for g in groups])
    lowest = np.array([level[g].min() for g in groups])
    highest = np.array([level[g].max() for g in groups])
    n_r, p_r = n[rows], pp[rows]
    k_lo, k_hi = stats.nbinom.ppf(lowest, n_r, p_r), stats.nbinom.ppf(highest, n_r, p_r)
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        below = np.where(k_lo > 0, special.betainc(n_r, np.maximum(k_lo, 1.0), p_r), 0.0)  # CDF(k_lo - 1)
        log_pmf0 = stats.nbinom.logpmf(k_lo, n_r, p_r)
        log_q = np.log1p(-p_r)
        for i, idx in enumerate(groups):
            width = k_hi[i] - k_lo[i] + 1
            if not np.isfinite(width) or width > max_window:
                continue
            k = k_lo[i] + np.arange(1, int(width))
            log_pmf = log_pmf0[i] + np.concatenate([[0.0], np.cumsum(np.log((k - 1 + n_r[i]) / k) + log_q[i])])
            cdf = below[i] + np.cumsum(np.exp(log_pmf))
            j = np.searchsorted(cdf, level[idx], side="left")
            ok = j < cdf.size
            out[idx[ok]] = k_lo[i] + j[ok]
    missing = out < 0
    if missing.any():
        out[missing] = stats.nbinom.ppf(level[missing], n[row[missing]], pp[row[missing]])
    return out


def _cdf_table(n: np.ndarray, pp: np.ndarray, width: int) -> np.ndarray:
    """NB CDF at 0..width-1 per row, from the pmf recurrence in logs (cheaper than betainc per cell)."""
    k = np.arange(1, width)[None, :]
    with np.errstate(divide="ignore", invalid="ignore"):
        step = np.log((k - 1 + n[:, None]) / k) + np.log1p(-pp)[:, None]
        log_pmf = np.concatenate([(n * np.log(pp))[:, None], (n * np.log(pp))[:, None] + np.cumsum(step, axis=1)],
                                 axis=1)
    return np.cumsum(np.exp(log_pmf), axis=1)


def with_totals(dyad_forecast: pd.DataFrame, quantiles: Sequence[float], **kwargs: object) -> pd.DataFrame:
    """Dyad rows (level 'dyad') followed by their totals: the frame a snapshot stores."""
    dyads = dyad_forecast.drop(columns="level", errors="ignore")
    dyads.insert(0, "level", "dyad")
    return pd.concat([dyads, aggregate_totals(dyads, quantiles, **kwargs)], ignore_index=True)  # type: ignore[arg-type]
