"""Zeros at scale: dyads with no positive flow for `lookback` months get one pooled forecast, not a fit.

Why: of ~40,000 dyads most never or rarely see arrivals; fitting them row by row costs most of the time
and teaches the models little. A dyad is dormant at anchor month t when `months_since_positive` >= lookback
(no arrivals in months t-lookback+1 .. t); a missing value means never positive in the visible history and
also counts as dormant.

`DormantForecaster` learns, per horizon h, from every training row that was dormant at its anchor (pooled
over all dyads, including dyads that later woke up):
* p = P(arrivals at t+h > 0 | dormant at t), per bucket of contiguity x distance tercile x depth of
  dormancy (dormant for < 2 x lookback months, or longer / never positive), shrunk towards the horizon's
  pooled rate with `prior_strength` pseudo-rows (empirical-Bayes style; common practice, no source);
* the distribution of the size when positive, pooled per horizon (positives are rare), as quantiles on a
  grid of 200 levels.
The forecast is the mixture "0 with probability 1 - p, else a size": mean = p x mean size, level tau has
quantile 0 when tau <= 1 - p and otherwise the size quantile at (tau - (1 - p)) / p, so upper quantiles turn
positive only when p exceeds 1 - tau. Everything is vectorised over rows.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

import numpy as np
import pandas as pd

from dyadcast.config import DEFAULT_QUANTILES
from dyadcast.models.base import CountModel, quantile_column, target_column, target_months

SIZE_GRID = 200


def dormant_mask(frame: pd.DataFrame, lookback: int) -> np.ndarray:
    """True where the anchor month ends `lookback` or more months without arrivals."""
    if "months_since_positive" not in frame.columns:
        raise KeyError("training frame has no column 'months_since_positive' (features contract, DEVELOPERS.md); "
                       "rebuild the features with dyadcast.features.build_features")
    msp = frame["months_since_positive"].to_numpy(dtype=float)
    return ~(msp < lookback)  # NaN (never positive) counts as dormant


def split_dormant(train: pd.DataFrame, rows: pd.DataFrame, lookback: int
                  ) -> tuple[pd.DataFrame, pd.DataFrame, pd.DataFrame]:
    """(active_train, active_rows, dormant_rows): dyads dormant at the cutoff leave the row-by-row fit."""
    dormant = dormant_mask(rows, lookback)
    in_train = _in_dyads(train, rows[dormant])
    return (train[~in_train].reset_index(drop=True), rows[~dormant].reset_index(drop=True),
            rows[dormant].reset_index(drop=True))


def _in_dyads(frame: pd.DataFrame, dyads: pd.DataFrame) -> np.ndarray:
    """True where the row's (origin, destination) pair is one of `dyads`' pairs (as MultiIndex.isin).

    Why integer codes: a MultiIndex over the 2.6 M training rows of the full scale hashed every pair of text
    codes (1.5 s); factorizing each column once and comparing integer pair keys takes about 0.2 s.
    """
    key, wanted = np.zeros(len(frame), np.int64), np.zeros(len(dyads), np.int64)
    found = np.ones(len(dyads), dtype=bool)
    for col in ("origin", "destination"):
        code, uniques = pd.factorize(frame[col], use_na_sentinel=False)  # a missing code is a value too
        at = pd.Index(uniques).get_indexer(dyads[col])
        key = key * len(uniques) + code
        wanted = wanted * len(uniques) + at
        found &= at >= 0
    return np.isin(key, wanted[found])


class DormantForecaster(CountModel):
    name = "dormant"
    quantile_method = "empirical:pooled-dormant-mixture"

    def __init__(self, horizon: int = 6, quantiles: Sequence[float] = DEFAULT_QUANTILES, lookback: int = 24,
                 seed: int = 0, prior_strength: float = 50.0) -> None:
        super().__init__(horizon=horizon, quantiles=quantiles, seed=seed)
        self.lookback = lookback
        self.prior_strength = prior_strength

    def _bucket(self, frame: pd.DataFrame) -> np.ndarray:
        """Bucket index: contiguous (0/1) x distance tercile (0-2, 3 = unknown) x deep dormancy (0/1)."""
        n = len(frame)
        cont = (frame["contiguous"].to_numpy(dtype=float) > 0) if "contiguous" in frame else np.zeros(n, bool)
        dist = frame["log_distance"].to_numpy(dtype=float) if "log_distance" in frame else np.full(n, np.nan)
        tercile = np.where(np.isnan(dist), 3, np.searchsorted(self.distance_edges_, dist, side="right"))
        msp = frame["months_since_positive"].to_numpy(dtype=float)
        deep = ~(msp < 2 * self.lookback)
        return cont.astype(int) * 8 + tercile * 2 + deep.astype(int)

    def _fit(self, train: pd.DataFrame) -> None:
        # only the columns used here: the dormant rows are most of the frame at full scale
        used = [c for c in ("contiguous", "log_distance", "months_since_positive",
                            *(target_column(h) for h in range(1, self.horizon + 1))) if c in train.columns]
        sleeping = train.loc[dormant_mask(train, self.lookback), used]
        dist = sleeping["log_distance"].to_numpy(dtype=float) if "log_distance" in sleeping else np.array([])
        dist = dist[np.isfinite(dist)]
        self.distance_edges_ = np.quantile(dist, [1 / 3, 2 / 3]) if dist.size else np.array([np.inf, np.inf])
        buckets = self._bucket(sleeping)
        self.state_: dict[int, dict[str, Any]] = {}
        for h in range(1, self.horizon + 1):
            y = sleeping[target_column(h)].to_numpy(dtype=float)
            known = np.isfinite(y)
            y, b = y[known], buckets[known]
            n, k = y.size, int(np.sum(y > 0))
            pooled = (k + 0.5) / (n + 1) if n else 0.0  # Jeffreys-smoothed; no evidence at all: 0
            n_b = np.bincount(b, minlength=16)
            k_b = np.bincount(b, weights=(y > 0).astype(float), minlength=16)
            p_b = (k_b + self.prior_strength * pooled) / (n_b + self.prior_strength)
            positive = y[y > 0]
            grid = (np.quantile(positive, np.arange(1, SIZE_GRID + 1) / SIZE_GRID, method="inverted_cdf")
                    if positive.size else np.ones(SIZE_GRID))
            self.state_[h] = {"rows": int(n), "positive": k, "p_pooled": float(pooled), "p_bucket": p_b,
                              "rows_bucket": n_b, "size_grid": grid,
                              "size_mean": float(positive.mean()) if positive.size else 1.0}

    def _predict_horizon(self, rows: pd.DataFrame, horizon: int) -> pd.DataFrame:
        st = self.state_[horizon]
        p = st["p_bucket"][self._bucket(rows)]
        out = pd.DataFrame({"origin": rows["origin"].to_numpy(), "destination": rows["destination"].to_numpy(),
                            "horizon": horizon, "target_month": target_months(rows, horizon).to_numpy(),
                            "mean": p * st["size_mean"]})
        for level in self.quantiles:
            v = (level - (1.0 - p)) / np.maximum(p, 1e-300)
            idx = np.clip(np.ceil(v * SIZE_GRID).astype(int) - 1, 0, SIZE_GRID - 1)
            out[quantile_column(level)] = np.where(v > 0, st["size_grid"][idx], 0.0)
        out["p_positive"] = p
        return out

    def fitted_state(self) -> dict[str, Any]:
        if not self.is_fitted:
            return {}
        return {"lookback": self.lookback, "distance_tercile_edges": [float(e) for e in self.distance_edges_],
                "bucket_index": "8 * contiguous + 2 * distance_tercile(0-2, 3 unknown) + deep_dormant",
                "horizons": {str(h): {
                    "rows": s["rows"], "positive": s["positive"], "p_pooled": s["p_pooled"],
                    "p_bucket": np.round(s["p_bucket"], 6).tolist(), "rows_bucket": s["rows_bucket"].tolist(),
                    "size_mean": s["size_mean"],
                    "size_quantiles": {str(q): float(s["size_grid"][int(q * SIZE_GRID) - 1]) for q in (0.5, 0.9, 0.99)},
                } for h, s in self.state_.items()}}


def forecast_with_dormant(model: CountModel, train: pd.DataFrame, rows: pd.DataFrame, lookback: int
                          ) -> tuple[pd.DataFrame, DormantForecaster]:
    """Fit `model` on active dyads, the pooled forecaster on everything; one forecast frame for all rows."""
    active_train, active_rows, dormant_rows = split_dormant(train, rows, lookback)
    sleeper = DormantForecaster(model.horizon, model.quantiles, lookback, seed=model.seed).fit(train)
    parts = [sleeper.predict(dormant_rows)] if len(dormant_rows) else []
    if len(active_rows):
        parts.insert(0, model.fit(active_train).predict(active_rows))
    return pd.concat(parts, ignore_index=True), sleeper
