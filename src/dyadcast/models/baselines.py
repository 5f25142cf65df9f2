"""Baselines: persistence, seasonal persistence and rolling mean, with honest predictive distributions.

Persistence is the reference for skill everywhere, so its intervals must be neither flattering nor
absurd. A baseline has no likelihood, so its distribution is learned from its own in-sample errors:
for each horizon h, training targets y are paired with the point forecast p the baseline would have
made, and

* where p > 0: the rows are bucketed by the size of p (`BUCKET_EDGES`), and a row's quantiles are
  p times the empirical quantiles of the ratio y / p in its bucket; P(Y > 0) is the bucket's share of
  positive targets. Buckets with fewer than `min_bucket_rows` rows use the pooled ratios.
* where p == 0: P(Y > 0) and the quantiles come from the targets of training rows with a zero
  point forecast, so a zero forecast still carries an honest chance of arrivals.

Shares are smoothed as (k + 0.5) / (n + 1). Why empirical rather than an NB around p: persistence is
biased at small counts (a month with 1 arrival is often a low draw from a larger flow), and an NB
with mean p put P(Y > 0) at 0.36 where 0.71 was observed on simulated data; per-bucket ratios are
calibrated within each bucket by construction and cost one sort per bucket.

The point forecast (the `mean` column) is the baseline's own value, not the mean of that distribution.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any, ClassVar

import numpy as np
import pandas as pd

from dyadcast.config import DEFAULT_QUANTILES
from dyadcast.models.base import CountModel, forecast_frame, target_column

BUCKET_EDGES: tuple[float, ...] = (0.0, 1.0, 2.0, 4.0, 10.0, 30.0, 100.0, 300.0, np.inf)


def last_observed(frame: pd.DataFrame, max_lag: int = 12) -> np.ndarray:
    """lag_1, or the most recent earlier lag where lag_1 is missing; 0 when nothing was observed."""
    out = np.full(len(frame), np.nan)
    for k in range(1, max_lag + 1):
        col = f"lag_{k}"
        if col not in frame.columns:
            break
        out = np.where(np.isnan(out), frame[col].to_numpy(dtype=float), out)
    return np.nan_to_num(out, nan=0.0)


def sampled_positions(train: pd.DataFrame, horizon: int, max_rows: int | None, seed: int) -> np.ndarray:
    """Positions of the rows `subsample(horizon_rows(train, horizon), max_rows, seed)` keeps, ascending.

    Why not call those two: at full scale each copied the whole training frame (2.6 M rows x 42 columns)
    once per horizon only to keep 200,000 rows of it, ~0.5 s and ~0.9 GB each; this copies the kept rows only.
    The same seeded draw (pandas' `sample` is `RandomState(seed).choice(n, size, replace=False)`) picks the
    same rows; their order does not matter to the residual quantiles.
    """
    col = target_column(horizon)
    if col not in train.columns:
        raise KeyError(f"training frame has no column {col!r}; build features with horizon >= {horizon}")
    known = np.flatnonzero(train[col].notna().to_numpy())
    if max_rows is None or known.size <= max_rows:
        return known
    picked = np.random.RandomState(seed).choice(known.size, size=max_rows, replace=False)
    return known[np.sort(picked)]


class ResidualQuantiles:
    """Empirical distribution of target / point forecast per size bucket; of the target itself at zero."""

    def __init__(self, levels: Sequence[float], min_bucket_rows: int = 100) -> None:
        self.levels = tuple(levels)
        self.min_bucket_rows = min_bucket_rows

    def fit(self, y: np.ndarray, point: np.ndarray) -> ResidualQuantiles:
        y, point = np.asarray(y, dtype=float), np.asarray(point, dtype=float)
        pos = point > 0
        pooled = self._summary(y[pos] / point[pos]) if pos.any() else None
        self.bucket: list[dict[str, Any]] = []
        for lo, hi in zip(BUCKET_EDGES[:-1], BUCKET_EDGES[1:], strict=True):
            sel = pos & (point > lo) & (point <= hi)
            own = sel.sum() >= self.min_bucket_rows or pooled is None
            summary = self._summary(y[sel] / point[sel]) if own else dict(pooled, pooled=True)
            self.bucket.append(dict(summary, n=int(sel.sum())))
        self.zero = dict(self._summary(y[~pos]), n=int((~pos).sum()))
        return self

    def _summary(self, values: np.ndarray) -> dict[str, Any]:
        """Quantiles and smoothed P(> 0); (k + 0.5) / (n + 1) keeps P(> 0) off 0 and 1 with little data."""
        if values.size == 0:
            return {"quantiles": [0.0] * len(self.levels), "p_positive": 0.5, "pooled": False}
        q = [float(np.quantile(values, level, method="inverted_cdf")) for level in self.levels]
        p_positive = float((np.sum(values > 0) + 0.5) / (values.size + 1))
        return {"quantiles": q, "p_positive": p_positive, "pooled": False}

    def predict(self, point: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """(quantiles (n, k), p_positive (n,)) for point forecasts."""
        point = np.asarray(point, dtype=float)
        ratio_q = np.array([b["quantiles"] for b in self.bucket])
        ratio_p = np.array([b["p_positive"] for b in self.bucket])
        idx = np.clip(np.searchsorted(BUCKET_EDGES, point, side="left") - 1, 0, len(self.bucket) - 1)
        q = point[:, None] * ratio_q[idx]
        p_pos = ratio_p[idx]
        zero = point <= 0
        q[zero] = np.asarray(self.zero["quantiles"])
        p_pos[zero] = self.zero["p_positive"]
        return q, p_pos

    def state(self) -> dict[str, Any]:
        return {"bucket_edges": [float(e) for e in BUCKET_EDGES], "ratio_buckets": self.bucket,
                "zero_point": self.zero}


class _Baseline(CountModel):
    quantile_method = "empirical:residual-ratios (per horizon and size bucket of the point forecast)"
    # column-name prefixes `point` reads: the fit copies only these columns of its sampled rows
    point_inputs: ClassVar[tuple[str, ...]] = ("lag_",)

    def __init__(self, horizon: int = 6, quantiles: Sequence[float] = DEFAULT_QUANTILES, seed: int = 0,
                 max_rows: int | None = 200_000) -> None:
        super().__init__(horizon=horizon, quantiles=quantiles, seed=seed)
        self.max_rows = max_rows

    def point(self, frame: pd.DataFrame, horizon: int) -> np.ndarray:
        raise NotImplementedError

    def _fit(self, train: pd.DataFrame) -> None:
        self.residual_: dict[int, ResidualQuantiles] = {}
        inputs = [train.columns.get_loc(c) for c in train.columns if c.startswith(self.point_inputs)]
        for h in range(1, self.horizon + 1):
            at = sampled_positions(train, h, self.max_rows, self.seed + h)
            y = train[target_column(h)].to_numpy(dtype=float)[at]
            self.residual_[h] = ResidualQuantiles(self.quantiles).fit(y, self.point(train.iloc[at, inputs], h))

    def _predict_horizon(self, rows: pd.DataFrame, horizon: int) -> pd.DataFrame:
        point = self.point(rows, horizon)
        q, p_pos = self.residual_[horizon].predict(point)
        return forecast_frame(rows, horizon, point, q, p_pos, self.quantiles)

    def fitted_state(self) -> dict[str, Any]:
        return {"residual_distribution": {str(h): r.state() for h, r in self.residual_.items()}}


class Persistence(_Baseline):
    """Next months look like this month: mean = last observed arrivals, for every horizon."""

    name = "persistence"

    def point(self, frame: pd.DataFrame, horizon: int) -> np.ndarray:
        return last_observed(frame)


class SeasonalPersistence(_Baseline):
    """Same calendar month last year: target t+h uses lag_(13-h); falls back to persistence."""

    name = "seasonal_persistence"

    def point(self, frame: pd.DataFrame, horizon: int) -> np.ndarray:
        fallback = last_observed(frame)
        col = f"lag_{13 - horizon}"
        if horizon > 12 or col not in frame.columns:
            return fallback
        same_month = frame[col].to_numpy(dtype=float)
        return np.where(np.isnan(same_month), fallback, same_month)


class RollingMean(_Baseline):
    """Mean of the last `window` months (missing months skipped); falls back to persistence."""

    name = "rolling_mean"
    point_inputs = ("lag_", "roll_mean_")

    def __init__(self, horizon: int = 6, quantiles: Sequence[float] = DEFAULT_QUANTILES, seed: int = 0,
                 max_rows: int | None = 200_000, window: int = 3) -> None:
        super().__init__(horizon=horizon, quantiles=quantiles, seed=seed, max_rows=max_rows)
        if not 1 <= window <= 12:
            raise ValueError(f"RollingMean window={window}: use 1 to 12 months "
                             "(the frame carries lag_1..lag_12)")
        self.window = window

    def point(self, frame: pd.DataFrame, horizon: int) -> np.ndarray:
        fallback = last_observed(frame)
        col = f"roll_mean_{self.window}"
        value = frame[col].to_numpy(dtype=float) if col in frame.columns else np.full(len(frame), np.nan)
        lags = [f"lag_{k}" for k in range(1, self.window + 1) if f"lag_{k}" in frame.columns]
        if lags and np.isnan(value).any():
            stack = frame[lags].to_numpy(dtype=float)
            seen = (~np.isnan(stack)).sum(axis=1)
            partial = np.nansum(stack, axis=1) / np.maximum(seen, 1)
            value = np.where(np.isnan(value) & (seen > 0), partial, value)
        return np.where(np.isnan(value), fallback, value)
