"""Invented training frames in the features contract (DEVELOPERS.md) for the GBM, ensemble, dormant and totals tests.

Truth per dyad and month: active dyads draw NB2(mu, alpha) with
log mu = base + a_o + g_d - 0.9 log_distance + 0.6 contiguous + 0.3 sin(2 pi month / 12) + 0.4 push[o, t];
dormant dyads are positive with a fixed probability `wake_rate` per month (independently), with size
1 + Poisson(`wake_size`). A burn-in precedes the first anchor so lags and months_since_positive are defined.
Origins use codes XAA..., destinations QMA... (ISO 3166-1 user-assigned ranges). All data is made up.
"""

from __future__ import annotations

import string
from dataclasses import dataclass

import numpy as np
import pandas as pd

LETTERS = string.ascii_uppercase
BURN_IN = 36
MSP_CAP = 120


def origin_codes(n: int) -> list[str]:
    return [f"X{LETTERS[i // 26]}{LETTERS[i % 26]}" for i in range(n)]


def destination_codes(n: int) -> list[str]:
    return [f"Q{LETTERS[12 + i // 26]}{LETTERS[i % 26]}" for i in range(n)]


@dataclass
class Sim:
    frame: pd.DataFrame  # anchors up to the cutoff (targets NaN beyond it); includes the cutoff rows
    train: pd.DataFrame  # anchors before the cutoff (what the cycle trains on)
    rows: pd.DataFrame  # anchor rows at the cutoff
    future: pd.DataFrame  # origin, destination, horizon, arrivals, mu: held-out truth after the cutoff
    alpha: float
    wake_rate: float


def _trailing_mean(y: np.ndarray, w: int) -> np.ndarray:
    c = np.concatenate([np.zeros((y.shape[0], 1)), np.cumsum(y, axis=1)], axis=1)
    out = np.full_like(y, np.nan)
    out[:, w - 1:] = (c[:, w:] - c[:, :-w]) / w
    return out


def simulate(n_origins: int = 12, n_destinations: int = 30, n_months: int = 60, horizon: int = 6,
             alpha: float = 0.5, dormant_share: float = 0.0, wake_rate: float = 0.03, wake_size: float = 2.0,
             base: float = 8.0, seed: int = 0) -> Sim:
    rng = np.random.default_rng(seed)
    o_idx, d_idx = (a.ravel() for a in np.meshgrid(np.arange(n_origins), np.arange(n_destinations), indexing="ij"))
    n_dyads, total = o_idx.size, BURN_IN + n_months + horizon
    log_distance = np.log(rng.uniform(200, 6000, n_dyads))
    contiguous = (log_distance < np.log(900)).astype(float)
    push = np.zeros((n_origins, total))
    for t in range(1, total):
        push[:, t] = 0.8 * push[:, t - 1] + rng.normal(0, 0.4, n_origins)
    months = pd.date_range("2015-01-01", periods=total, freq="MS")
    season = 0.3 * np.sin(2 * np.pi * months.month.to_numpy() / 12)
    log_mu = (base + rng.normal(0, 0.8, n_origins)[o_idx, None] + rng.normal(0, 0.5, n_destinations)[d_idx, None]
              - 0.9 * log_distance[:, None] + 0.6 * contiguous[:, None] + season[None, :] + 0.4 * push[o_idx])
    mu = np.exp(log_mu)
    dormant = rng.random(n_dyads) < dormant_share
    y = rng.poisson(rng.gamma(1 / alpha, alpha * mu)).astype(float)
    wake = rng.random((n_dyads, total)) < wake_rate
    y[dormant] = np.where(wake[dormant], 1 + rng.poisson(wake_size, (dormant.sum(), total)), 0.0)
    mu[dormant] = wake_rate * (1 + wake_size)
    cutoff = BURN_IN + n_months - 1
    frame = _features(y, cutoff, horizon, o_idx, d_idx)
    dyad, t = frame.pop("_dyad").to_numpy(), frame.pop("_t").to_numpy()
    frame.insert(0, "origin", np.asarray(origin_codes(n_origins))[o_idx][dyad])
    frame.insert(1, "destination", np.asarray(destination_codes(n_destinations))[d_idx][dyad])
    frame.insert(2, "month", months[t])
    frame["calendar_month"] = months.month.to_numpy()[t]
    frame["log_distance"] = log_distance[dyad]
    frame["contiguous"] = contiguous[dyad]
    frame["common_language"] = (dyad % 5 == 0).astype(float)
    frame["colonial_tie"] = 0.0
    frame["log_diaspora"] = np.log1p(mu[dyad, 0] * 10)
    frame["push_conflict"] = push[o_idx[dyad], t]
    frame["signal_news"] = push[o_idx[dyad], t] + rng.normal(0, 0.3, len(frame))
    cut = months[cutoff]
    future = pd.concat([pd.DataFrame({
        "origin": np.asarray(origin_codes(n_origins))[o_idx],
        "destination": np.asarray(destination_codes(n_destinations))[d_idx],
        "horizon": h, "arrivals": y[:, cutoff + h], "mu": mu[:, cutoff + h]}) for h in range(1, horizon + 1)],
        ignore_index=True)
    return Sim(frame=frame, train=frame[frame["month"] < cut].reset_index(drop=True),
               rows=frame[frame["month"] == cut].reset_index(drop=True), future=future, alpha=alpha,
               wake_rate=wake_rate)


def _features(y: np.ndarray, cutoff: int, horizon: int, o_idx: np.ndarray, d_idx: np.ndarray) -> pd.DataFrame:
    """Feature columns for anchors BURN_IN..cutoff; targets beyond the cutoff are NaN."""
    n_dyads = y.shape[0]
    anchors = np.arange(BURN_IN, cutoff + 1)
    seen = y[:, : cutoff + 1]
    cols: dict[str, np.ndarray] = {f"lag_{k}": seen[:, anchors - k + 1] for k in range(1, 13)}
    for w in (3, 6, 12):
        cols[f"roll_mean_{w}"] = _trailing_mean(seen, w)[:, anchors]
    msp = np.zeros_like(seen)
    last = np.full(n_dyads, -10_000)
    for t in range(seen.shape[1]):
        last = np.where(seen[:, t] > 0, t, last)
        msp[:, t] = np.minimum(t - last, MSP_CAP)
    cols["months_since_positive"] = msp[:, anchors]
    outflow = pd.DataFrame(seen).groupby(o_idx).transform("sum").to_numpy()
    inflow = pd.DataFrame(seen).groupby(d_idx).transform("sum").to_numpy()
    cols["origin_outflow_lag_1"] = outflow[:, anchors]
    cols["origin_outflow_roll_3"] = _trailing_mean(outflow, 3)[:, anchors]
    cols["destination_inflow_lag_1"] = inflow[:, anchors]
    cols["destination_inflow_roll_3"] = _trailing_mean(inflow, 3)[:, anchors]
    out12 = _trailing_mean(outflow, 12)[:, anchors]
    cols["origin_share_12"] = np.divide(cols["roll_mean_12"], out12, out=np.zeros_like(out12), where=out12 > 0)
    for h in range(1, horizon + 1):
        tgt = np.full((n_dyads, anchors.size), np.nan)
        known = anchors + h <= cutoff
        tgt[:, known] = y[:, anchors[known] + h]
        cols[f"target_{h}"] = tgt
    frame = pd.DataFrame({k: v.ravel() for k, v in cols.items()})
    frame["_dyad"] = np.repeat(np.arange(n_dyads), anchors.size)
    frame["_t"] = np.tile(anchors, n_dyads)
    return frame
