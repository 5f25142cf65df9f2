"""Synthetic training frames in the features contract (DEVELOPERS.md), simulated from a known NB2 process.

All data is invented. Origins use codes XAA..., destinations QMA... (ISO 3166-1 user-assigned ranges).
The truth: log mu[o,d,t] = c + a_o + g_d - 1.1 log_distance + 0.7 contiguous + u_od + s(month)
+ 0.4 push[o,t]; arrivals ~ NB2(mu, alpha). A share of dyads is dormant (mu = 0).
"""

from __future__ import annotations

import string
from dataclasses import dataclass

import numpy as np
import pandas as pd

LETTERS = string.ascii_uppercase


def origin_codes(n: int) -> list[str]:
    return [f"X{LETTERS[i // 26]}{LETTERS[i % 26]}" for i in range(n)]


def destination_codes(n: int) -> list[str]:
    return [f"Q{LETTERS[12 + i // 26]}{LETTERS[i % 26]}" for i in range(n)]


@dataclass
class SimFrame:
    frame: pd.DataFrame  # training frame: anchor months up to the cutoff, targets NaN beyond it
    rows: pd.DataFrame  # anchor rows at the cutoff (what the models predict from)
    future: pd.DataFrame  # origin, destination, horizon, arrivals, mu: held-out truth for `rows`
    holdout_rows: pd.DataFrame  # anchor rows at the cutoff and the `holdout_anchors - 1` months after it
    holdout: pd.DataFrame  # origin, destination, month (anchor), horizon, arrivals, mu for `holdout_rows`
    alpha: float


def _rolling_mean(y: np.ndarray, w: int) -> np.ndarray:
    """Mean of the last w months up to and including t; NaN until w months exist or any is missing."""
    out = np.full_like(y, np.nan)
    c = np.cumsum(np.nan_to_num(y), axis=1)
    nan_c = np.cumsum(np.isnan(y), axis=1)
    for t in range(w - 1, y.shape[1]):
        total = c[:, t] - (c[:, t - w] if t >= w else 0)
        nans = nan_c[:, t] - (nan_c[:, t - w] if t >= w else 0)
        out[:, t] = np.where(nans == 0, total / w, np.nan)
    return out


def simulate(
    n_origins: int = 12,
    n_destinations: int = 30,
    n_months: int = 60,
    horizon: int = 6,
    alpha: float = 0.5,
    dormant_share: float = 0.1,
    missing_share: float = 0.0,
    level: float = 1.0,
    push_sd: float = 0.5,
    holdout_anchors: int = 1,
    seed: int = 0,
) -> SimFrame:
    """Training frame with cutoff at month index n_months - 1; the model never sees targets after it.

    `holdout_anchors` > 1 adds later anchor rows (features use months after the cutoff, targets do
    not enter training), so one fitted model is scored on several forecast origins.
    """
    rng = np.random.default_rng(seed)
    origins, dests = origin_codes(n_origins), destination_codes(n_destinations)
    o_idx, d_idx = np.meshgrid(np.arange(n_origins), np.arange(n_destinations), indexing="ij")
    o_idx, d_idx = o_idx.ravel(), d_idx.ravel()
    extra = holdout_anchors - 1
    n_dyads, total_months = o_idx.size, n_months + extra + horizon
    distance = rng.uniform(200, 6000, n_dyads)
    log_distance = np.log(distance)
    contiguous = (distance < 900).astype(float)
    common_language = (rng.random(n_dyads) < 0.2).astype(float)
    log_diaspora = np.log1p(rng.gamma(1.0, 2000, n_dyads))
    a_o = rng.normal(0, 1.0, n_origins)
    g_d = rng.normal(0, 0.7, n_destinations)
    u_od = rng.normal(0, 0.5, n_dyads)
    season = 0.3 * np.sin(2 * np.pi * np.arange(12) / 12)
    push = np.zeros((n_origins, total_months))
    for t in range(1, total_months):
        push[:, t] = 0.8 * push[:, t - 1] + rng.normal(0, push_sd, n_origins)
    pull = rng.normal(0, 1, (n_destinations, total_months))
    months = pd.date_range("2019-01-01", periods=total_months, freq="MS")
    cal = months.month.to_numpy()
    log_mu = (
        level + 8.0 + a_o[o_idx, None] + g_d[d_idx, None]
        - 1.1 * log_distance[:, None] + 0.7 * contiguous[:, None]
        + u_od[:, None] + season[cal - 1][None, :] + 0.4 * push[o_idx]
    )
    mu = np.exp(log_mu)
    mu[rng.random(n_dyads) < dormant_share] = 0.0
    lam = rng.gamma(1 / alpha, alpha * mu) if alpha > 0 else mu
    y = rng.poisson(lam).astype(float)
    observed = y.copy()
    if missing_share > 0:  # a (destination, month) missing from every load: all its dyads unknown
        holes = rng.random((n_destinations, total_months)) < missing_share
        observed[holes[d_idx]] = np.nan
    cutoff = n_months - 1
    frame = _features(observed, last_anchor=cutoff + extra, horizon=horizon, o_idx=o_idx, d_idx=d_idx)
    dyad = frame.pop("_dyad").to_numpy()
    t_of_row = frame.pop("_t").to_numpy()
    frame["origin"] = np.asarray(origins)[o_idx][dyad]
    frame["destination"] = np.asarray(dests)[d_idx][dyad]
    frame["month"] = months[t_of_row]
    frame["calendar_month"] = frame["month"].dt.month
    frame["log_distance"] = log_distance[dyad]
    frame["contiguous"] = contiguous[dyad]
    frame["common_language"] = common_language[dyad]
    frame["colonial_tie"] = 0.0
    frame["log_diaspora"] = log_diaspora[dyad]
    frame["push_conflict"] = push[o_idx[dyad], t_of_row]
    frame["pull_labour"] = pull[d_idx[dyad], t_of_row]
    frame["signal_news"] = push[o_idx[dyad], t_of_row] + rng.normal(0, 0.3, len(frame))
    keys = ["origin", "destination", "month"]
    frame = frame[keys + [c for c in frame.columns if c not in keys]]
    held = t_of_row >= cutoff
    holdout_rows = frame[held].reset_index(drop=True)
    parts = []
    for h in range(1, horizon + 1):
        t = t_of_row[held] + h
        parts.append(holdout_rows[keys].assign(horizon=h, arrivals=y[dyad[held], t], mu=mu[dyad[held], t]))
    holdout = pd.concat(parts, ignore_index=True)
    train = frame[t_of_row <= cutoff].copy()
    for h in range(1, horizon + 1):  # targets after the cutoff are unknown at the cutoff
        train.loc[t_of_row[t_of_row <= cutoff] + h > cutoff, f"target_{h}"] = np.nan
    train = train.reset_index(drop=True)
    cutoff_month = months[cutoff]
    rows = train[train["month"] == cutoff_month].reset_index(drop=True)
    future = holdout[holdout["month"] == cutoff_month].drop(columns="month").reset_index(drop=True)
    return SimFrame(frame=train, rows=rows, future=future, holdout_rows=holdout_rows, holdout=holdout,
                    alpha=alpha)


def _features(y: np.ndarray, last_anchor: int, horizon: int, o_idx: np.ndarray, d_idx: np.ndarray
              ) -> pd.DataFrame:
    n_dyads, _ = y.shape
    anchors = np.arange(last_anchor + 1)
    cols: dict[str, np.ndarray] = {}
    for k in range(1, 13):
        lag = np.full((n_dyads, anchors.size), np.nan)
        lag[:, k - 1:] = y[:, : anchors.size - k + 1]
        cols[f"lag_{k}"] = lag
    seen = y[:, : anchors.size]
    for w in (3, 6, 12):
        cols[f"roll_mean_{w}"] = _rolling_mean(seen, w)
    msp = np.full((n_dyads, anchors.size), np.nan)
    last = np.full(n_dyads, -1)
    for t in anchors:
        last = np.where(seen[:, t] > 0, t, last)
        msp[:, t] = np.where(last >= 0, t - last, np.nan)
    cols["months_since_positive"] = msp
    outflow = pd.DataFrame(seen).groupby(o_idx).transform(lambda s: s.sum(min_count=1)).to_numpy()
    inflow = pd.DataFrame(seen).groupby(d_idx).transform(lambda s: s.sum(min_count=1)).to_numpy()
    cols["origin_outflow_lag_1"] = outflow
    cols["origin_outflow_roll_3"] = _rolling_mean(outflow, 3)
    cols["destination_inflow_lag_1"] = inflow
    cols["destination_inflow_roll_3"] = _rolling_mean(inflow, 3)
    out12 = _rolling_mean(outflow, 12)
    with np.errstate(invalid="ignore", divide="ignore"):
        cols["origin_share_12"] = np.where(out12 > 0, cols["roll_mean_12"] / out12, 0.0)
    for h in range(1, horizon + 1):
        cols[f"target_{h}"] = y[:, h: anchors.size + h]
    frame = pd.DataFrame({k: v.ravel() for k, v in cols.items()})
    frame["_dyad"] = np.repeat(np.arange(n_dyads), anchors.size)
    frame["_t"] = np.tile(anchors, n_dyads)
    return frame
