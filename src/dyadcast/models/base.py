"""The one interface every count model shares, in the spirit of scikit-learn's estimator contract.

Configuration goes in the constructor; `fit` learns state (attributes ending in `_`); `predict`
returns, for every dyad row of the cutoff month and every horizon h = 1..H, the predictive mean,
the configured quantiles and P(arrivals > 0).

Training frame (from `dyadcast.features.build_features`): one row per dyad and anchor month t,
with key columns `origin`, `destination`, `month` (first day of t), feature columns, and target
columns `target_1 .. target_H` holding arrivals in month t+h (NaN where not yet known or missing).
The rows to predict are the rows whose `month` equals the cutoff.
"""

from __future__ import annotations

from abc import ABC, abstractmethod
from collections.abc import Sequence
from typing import Any, ClassVar

import numpy as np
import pandas as pd

from dyadcast.config import DEFAULT_QUANTILES

KEY_COLUMNS: tuple[str, ...] = ("origin", "destination", "month")
FORECAST_KEY_COLUMNS: tuple[str, ...] = ("origin", "destination", "horizon", "target_month")


def quantile_column(level: float) -> str:
    """0.05 -> 'q050', 0.5 -> 'q500', 0.025 -> 'q025': SQL-friendly and sortable."""
    return f"q{round(level * 1000):03d}"


def target_column(horizon: int) -> str:
    return f"target_{horizon}"


def forecast_columns(quantiles: Sequence[float]) -> list[str]:
    return [*FORECAST_KEY_COLUMNS, "mean", *(quantile_column(q) for q in quantiles), "p_positive"]


class NotFittedError(RuntimeError):
    pass


class CountModel(ABC):
    """Base class: subclasses set `name`, implement `_fit` and `_predict_horizon`."""

    name: ClassVar[str] = "base"
    # How the quantiles are obtained, written into snapshot metadata: "parametric:<family>" or "conformal".
    quantile_method: ClassVar[str] = "parametric"

    def __init__(self, horizon: int = 6, quantiles: Sequence[float] = DEFAULT_QUANTILES, seed: int = 0) -> None:
        self.horizon = horizon
        self.quantiles = tuple(sorted(quantiles))
        self.seed = seed

    # --- scikit-learn-like plumbing -------------------------------------------------------------
    def get_params(self) -> dict[str, Any]:
        """Constructor arguments, recorded in snapshot metadata so the run can be reproduced."""
        import inspect

        names = [p for p in inspect.signature(type(self).__init__).parameters if p != "self"]
        return {n: getattr(self, n) for n in names if hasattr(self, n)}

    def fitted_state(self) -> dict[str, Any]:
        """JSON-serialisable learned state (coefficients, dispersion, chosen hyper-parameters)."""
        return {}

    def save_artifacts(self, directory) -> list[str]:  # noqa: ANN001 - a pathlib.Path
        """Write model files next to the snapshot; returns the file names written."""
        return []

    @property
    def is_fitted(self) -> bool:
        return getattr(self, "fitted_", False)

    # --- the contract ---------------------------------------------------------------------------
    def fit(self, train: pd.DataFrame) -> CountModel:
        self._fit(train)
        self.fitted_ = True
        return self

    def predict(self, rows: pd.DataFrame) -> pd.DataFrame:
        """Forecast frame with `forecast_columns(self.quantiles)`; one row per dyad and horizon."""
        if not self.is_fitted:
            raise NotFittedError(f"{self.name}: call fit() before predict()")
        parts = []
        for h in range(1, self.horizon + 1):
            out = self._predict_horizon(rows, h)
            parts.append(out)
        frame = pd.concat(parts, ignore_index=True)
        return finalize_forecast(frame, self.quantiles)

    @abstractmethod
    def _fit(self, train: pd.DataFrame) -> None: ...

    @abstractmethod
    def _predict_horizon(self, rows: pd.DataFrame, horizon: int) -> pd.DataFrame:
        """Frame with origin, destination, horizon, target_month, mean, quantile columns, p_positive."""


def finalize_forecast(frame: pd.DataFrame, quantiles: Sequence[float]) -> pd.DataFrame:
    """Enforce the invariants every snapshot relies on: quantiles >= 0, non-crossing, p in [0, 1]."""
    qcols = [quantile_column(q) for q in sorted(quantiles)]
    values = np.clip(frame[qcols].to_numpy(dtype=float), 0.0, None)
    values = np.maximum.accumulate(values, axis=1)
    out = frame.copy()
    out[qcols] = values
    out["mean"] = np.clip(out["mean"].to_numpy(dtype=float), 0.0, None)
    out["p_positive"] = np.clip(out["p_positive"].to_numpy(dtype=float), 0.0, 1.0)
    out["horizon"] = out["horizon"].astype("int16")
    if np.isnan(out[["mean", *qcols, "p_positive"]].to_numpy(dtype=float)).any():
        raise ValueError("forecast contains NaN; the model produced an undefined prediction")
    return out[forecast_columns(quantiles)].reset_index(drop=True)


def known_at(frame: pd.DataFrame, cutoff: pd.Timestamp, horizon: int) -> pd.DataFrame:
    """The rows anchored at or before `cutoff`, with every target month after `cutoff` hidden (NaN): what a run
    at that cutoff could have trained on (revisions aside). For pseudo-cutoffs inside a training frame."""
    months = pd.to_datetime(frame["month"])
    past = frame[months <= cutoff].copy()
    anchors = pd.to_datetime(past["month"])
    for h in range(1, horizon + 1):
        past.loc[(anchors + pd.DateOffset(months=h) > cutoff).to_numpy(), target_column(h)] = np.nan
    return past


def target_months(rows: pd.DataFrame, horizon: int) -> pd.Series:
    """Target month t+h for anchor month t (first-of-month timestamps)."""
    return (pd.to_datetime(rows["month"]) + pd.DateOffset(months=horizon)).dt.as_unit("us")


def forecast_frame(rows: pd.DataFrame, horizon: int, mean: np.ndarray, q: np.ndarray, p_positive: np.ndarray,
                   quantiles: Sequence[float]) -> pd.DataFrame:
    """The per-horizon frame `_predict_horizon` returns; one builder so every model emits the same columns."""
    out = pd.DataFrame({
        "origin": rows["origin"].to_numpy(), "destination": rows["destination"].to_numpy(),
        "horizon": horizon, "target_month": target_months(rows, horizon).to_numpy(), "mean": mean,
    })
    for j, level in enumerate(quantiles):
        out[quantile_column(level)] = q[:, j]
    out["p_positive"] = p_positive
    return out
