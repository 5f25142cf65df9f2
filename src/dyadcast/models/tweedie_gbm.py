"""One global LightGBM model with a Tweedie objective, one booster per horizon (direct multi-horizon).

Why one booster per horizon rather than horizon as a feature: stacking H copies of the frame multiplies
memory by H for one model, while H boosters each see the frame once, can stop at their own number of
rounds and get their own dispersion; total training rows are the same.

Per horizon h (rows whose target_h is known):
* time-based validation: the last `validation_months` anchor months are held out; the fit part keeps only
  anchors t with t + h <= the first held-out anchor, so no target it learns from lies after that month;
* `tune=True` ("fit" mode): the Tweedie variance power is chosen from `power_grid` by mean Poisson deviance
  on the held-out months of horizon 1 (deviance with power 1 compares candidates on one scale) and shared
  by all horizons: it describes how the variance of these counts grows with their mean, which does not
  depend on the horizon, and searching once costs a third of searching per horizon. Rounds come from early
  stopping per horizon. `params` (a previous `fitted_state()`) reuses power and rounds: "refresh" mode
  (rounds only when they were learned at the same learning rate; else early stopping picks them again).
  Neither given: `default_power` with early stopping;
* the predictive distribution is NB2 around the predicted mean, alpha fitted by ML on the held-out
  residuals (models.md section 3: this calibrated better than Tweedie simulation or quantile objectives),
  or split-conformal quantiles on the same residuals with `interval_method="conformal"`;
* the final booster is refitted on every known row with the chosen power and rounds.

Cost: each horizon's rows are binned once (one `lgb.Dataset`; the fit and held-out parts are subsets of it).
Defaults (learning rate 0.1, 15 leaves, 63 bins, at most 300 rounds) were chosen for the monthly budget: on
the demo frame (12.6k rows per horizon) they scored a pooled WIS of 56.4 against 60.3 for the earlier
0.05 / 31 leaves / 255 bins, over three pseudo-cutoffs (`bench/models_demo.py --score`), at about a third
of the CPU (refresh about 1.5 s for six horizons).

Features: every numeric column except keys and targets, the target's calendar month, and origin and
destination as LightGBM categoricals (codes fixed at fit; unseen countries become missing).
"""

from __future__ import annotations

from collections.abc import Sequence
from pathlib import Path
from typing import Any

import lightgbm as lgb
import numpy as np
import pandas as pd

from dyadcast.config import DEFAULT_QUANTILES
from dyadcast.distributions import fit_nb_alpha, nbinom_p_positive, nbinom_quantiles
from dyadcast.models.base import CountModel, NotFittedError, quantile_column, target_column, target_months
from dyadcast.models.conformal import ConformalCalibrator, estimate_origin_rho
from dyadcast.models.design import horizon_rows, target_calendar_month

CATEGORICAL = ("origin", "destination")


def mean_tweedie_deviance(y: np.ndarray, mu: np.ndarray, power: float) -> float:
    """Mean unit deviance for 1 <= power < 2 (power 1 is Poisson); mu must be > 0."""
    y, mu = np.asarray(y, dtype=float), np.asarray(mu, dtype=float)
    if np.any(mu <= 0):
        raise ValueError("mean_tweedie_deviance: predictions must be > 0 (floor them first)")
    if power == 1:
        dev = 2 * (np.where(y > 0, y * np.log(np.where(y > 0, y, 1) / mu), 0.0) - y + mu)
    else:
        dev = 2 * (np.power(y, 2 - power) / ((1 - power) * (2 - power))
                   - y * np.power(mu, 1 - power) / (1 - power) + np.power(mu, 2 - power) / (2 - power))
    return float(np.mean(dev))


class TweedieGBM(CountModel):
    name = "tweedie_gbm"
    quantile_method = "parametric:nb-on-gbm-mean"

    def __init__(self, horizon: int = 6, quantiles: Sequence[float] = DEFAULT_QUANTILES, seed: int = 0,
                 tune: bool = True, params: dict[str, Any] | None = None,
                 power_grid: Sequence[float] = (1.1, 1.3, 1.5), default_power: float = 1.3,
                 validation_months: int = 6, learning_rate: float = 0.1, num_leaves: int = 15,
                 min_data_in_leaf: int = 50, max_rounds: int = 300, early_stopping_rounds: int = 30,
                 num_threads: int = 1, interval_method: str = "nb", max_bin: int = 63) -> None:
        super().__init__(horizon=horizon, quantiles=quantiles, seed=seed)
        if interval_method not in ("nb", "conformal"):
            raise ValueError(f"TweedieGBM: interval_method={interval_method!r}; use 'nb' or 'conformal'")
        self.tune, self.params = tune, params
        self.power_grid, self.default_power = tuple(power_grid), default_power
        self.validation_months, self.learning_rate = validation_months, learning_rate
        self.num_leaves, self.min_data_in_leaf = num_leaves, min_data_in_leaf
        self.max_rounds, self.early_stopping_rounds = max_rounds, early_stopping_rounds
        self.max_bin = max_bin
        # Capped at 2. Default 1: on the shared 2-core box, 2 OpenMP threads ran 10-20x slower under load.
        self.num_threads = max(1, min(int(num_threads), 2))
        self.interval_method = interval_method
        if interval_method == "conformal":
            self.quantile_method = ConformalCalibrator(self.quantiles).method + "-on-gbm-mean"

    # --- design ---------------------------------------------------------------------------------
    def _lgb_params(self, power: float) -> dict[str, Any]:
        return {"objective": "tweedie", "tweedie_variance_power": power, "learning_rate": self.learning_rate,
                "num_leaves": self.num_leaves, "min_data_in_leaf": self.min_data_in_leaf,
                "feature_fraction": 0.9, "max_bin": self.max_bin, "num_threads": self.num_threads,
                "seed": self.seed, "deterministic": True, "force_col_wise": True, "verbose": -1}

    def _design(self, frame: pd.DataFrame, horizon: int) -> np.ndarray:
        cols = [frame[c].to_numpy(dtype=float) if c in frame.columns else np.full(len(frame), np.nan)
                for c in self.numeric_]
        cols.append(target_calendar_month(frame, horizon).astype(float))
        for c in CATEGORICAL:
            codes = pd.Categorical(frame[c], categories=self.categories_[c]).codes.astype(float)
            cols.append(np.where(codes < 0, np.nan, codes))
        return np.column_stack(cols).astype(np.float32)

    def _dataset(self, x: np.ndarray, y: np.ndarray) -> lgb.Dataset:
        """One binned Dataset per horizon; the fit and held-out parts are subsets sharing its bins.

        Why: binning (Dataset construction) cost as much as ~60 boosting rounds here and was repeated for
        every candidate and refit. The bins use the feature values of every row (never the targets).
        """
        data = lgb.Dataset(x, y, feature_name=self.feature_names_, categorical_feature=list(CATEGORICAL),
                           params=self._dataset_params(), free_raw_data=False)
        return data.construct()

    def _dataset_params(self) -> dict[str, Any]:
        return {"max_bin": self.max_bin, "min_data_in_leaf": self.min_data_in_leaf, "verbose": -1,
                "num_threads": self.num_threads, "seed": self.seed, "deterministic": True}

    def _train(self, data: lgb.Dataset, power: float, rounds: int, valid: lgb.Dataset | None = None) -> lgb.Booster:
        kwargs: dict[str, Any] = {}
        if valid is not None:
            kwargs = {"valid_sets": [valid], "callbacks": [lgb.early_stopping(self.early_stopping_rounds,
                                                                              verbose=False)]}
        return lgb.train(self._lgb_params(power), data, num_boost_round=rounds, keep_training_booster=False,
                         **kwargs)

    def _split(self, rows: pd.DataFrame, horizon: int) -> tuple[np.ndarray, np.ndarray]:
        months = pd.to_datetime(rows["month"])
        anchors = np.sort(months.unique())
        if anchors.size < self.validation_months + horizon + 6:
            return np.ones(len(rows), bool), np.zeros(len(rows), bool)
        first_valid = pd.Timestamp(anchors[-self.validation_months])
        valid = (months >= first_valid).to_numpy()
        fit = (months + pd.DateOffset(months=horizon) <= first_valid).to_numpy()
        return fit, valid

    # --- fit ------------------------------------------------------------------------------------
    def _fit(self, train: pd.DataFrame) -> None:
        skip = {"origin", "destination", "month", "calendar_month"}
        self.numeric_ = [c for c in train.columns if c not in skip and not c.startswith("target_")
                         and pd.api.types.is_numeric_dtype(train[c])]
        self.categories_ = {c: sorted(train[c].astype(str).unique()) for c in CATEGORICAL}
        self.feature_names_ = [*self.numeric_, "target_calendar_month", *CATEGORICAL]
        self.boosters_: dict[int, lgb.Booster] = {}
        self.state_: dict[int, dict[str, Any]] = {}
        self.calibrators_ = ConformalCalibrator(self.quantiles)
        self.validation_: dict[int, tuple[np.ndarray, np.ndarray]] = {}  # held-out (y, mu) per horizon
        self.chosen_power_: float | None = None
        resid_parts = []
        for h in range(1, self.horizon + 1):
            rows = horizon_rows(train, h)
            if rows.empty:
                raise ValueError(f"tweedie_gbm: no training row has a known {target_column(h)}; "
                                 f"the training window must reach at least {h} months before the cutoff")
            x, y = self._design(rows, h), rows[target_column(h)].to_numpy(dtype=float)
            data = self._dataset(x, y)
            state, val_mu, val_mask = self._fit_horizon(h, data, y, *self._split(rows, h))
            self.boosters_[h] = self._train(data, state["power"], state["rounds"])
            self.state_[h] = state
            if val_mu is not None:
                vr = rows[val_mask]
                resid_parts.append(pd.DataFrame({"h": h, "y": y[val_mask], "mu": val_mu, "alpha": state["alpha"],
                                                 "origin": vr["origin"].to_numpy(),
                                                 "period": vr["month"].astype(str).to_numpy()}))
        # within-origin dependence of held-out errors, per horizon (shocks accumulate with the horizon);
        # pass it to dyadcast.totals.aggregate_totals(rho=...)
        self.origin_rho_ = {str(r["h"].iloc[0]): estimate_origin_rho(r["y"], r["mu"], r["alpha"], r["origin"],
                                                                     r["period"]) for r in resid_parts}

    def _fit_horizon(self, h: int, data: lgb.Dataset, y: np.ndarray, fit: np.ndarray, valid: np.ndarray):  # noqa: ANN202
        stored = _stored(self.params, h)
        if stored and stored.get("learning_rate", self.learning_rate) != self.learning_rate:
            stored = {"power": stored["power"]}  # rounds learned at another rate do not carry over: stop early
        if not valid.any() or not fit.any():  # too short to hold months out: in-sample dispersion, flagged
            power = stored.get("power", self.default_power)
            rounds = int(stored.get("rounds", min(self.max_rounds, 100)))
            booster = self._train(data, power, rounds)
            mu = booster.predict(data.get_data())
            return ({"power": power, "rounds": rounds, "alpha": fit_nb_alpha(y, mu), "alpha_source": "in-sample",
                     "validation_rows": 0, "validation_deviance": {}}, None, valid)
        part = data.subset(np.flatnonzero(fit).tolist())
        held_x, held_y = data.get_data()[valid], y[valid]
        if stored:
            candidates = [float(stored["power"])]
        elif self.tune and self.chosen_power_ is None:
            candidates = list(self.power_grid)
        else:
            candidates = [self.chosen_power_ or self.default_power]
        fixed_rounds = int(stored["rounds"]) if "rounds" in stored else None
        held = data.subset(np.flatnonzero(valid).tolist()) if fixed_rounds is None else None
        deviance, fitted = {}, {}
        for p in candidates:
            if fixed_rounds is not None:
                booster = self._train(part, p, fixed_rounds)
            else:
                booster = self._train(part, p, self.max_rounds, valid=held)
            mu = booster.predict(held_x, num_iteration=booster.best_iteration or None, num_threads=self.num_threads)
            deviance[p] = mean_tweedie_deviance(held_y, np.maximum(mu, 1e-9), 1.0)
            fitted[p] = (booster, mu)
        power = min(deviance, key=deviance.get)
        self.chosen_power_ = self.chosen_power_ or (power if self.tune and not stored else None)
        booster, mu = fitted[power]
        rounds = fixed_rounds or int(booster.best_iteration or booster.current_iteration())
        alpha = fit_nb_alpha(held_y, mu, start=stored.get("alpha"))
        if self.interval_method == "conformal":
            self.calibrators_.fit(held_y, mu, h)
        self.validation_[h] = (held_y, mu)
        return ({"power": power, "rounds": max(rounds, 1), "alpha": alpha, "alpha_source": "validation",
                 "validation_rows": int(valid.sum()),
                 "validation_deviance": {str(p): round(d, 6) for p, d in deviance.items()}}, mu, valid)

    # --- predict --------------------------------------------------------------------------------
    def predict_mean(self, rows: pd.DataFrame, horizon: int) -> np.ndarray:
        if not self.is_fitted:
            raise NotFittedError("tweedie_gbm: call fit() before predict()")
        return self.boosters_[horizon].predict(self._design(rows, horizon), num_threads=self.num_threads)

    def _predict_horizon(self, rows: pd.DataFrame, horizon: int) -> pd.DataFrame:
        mu = self.predict_mean(rows, horizon)
        if self.interval_method == "conformal" and horizon in self.calibrators_.state_:
            q, p_pos = self.calibrators_.quantiles(mu, horizon), self.calibrators_.p_positive(mu, horizon)
        else:
            alpha = self.state_[horizon]["alpha"]
            q, p_pos = nbinom_quantiles(mu, alpha, self.quantiles), nbinom_p_positive(mu, alpha)
        out = pd.DataFrame({"origin": rows["origin"].to_numpy(), "destination": rows["destination"].to_numpy(),
                            "horizon": horizon, "target_month": target_months(rows, horizon).to_numpy(),
                            "mean": mu})
        for j, level in enumerate(self.quantiles):
            out[quantile_column(level)] = q[:, j]
        out["p_positive"] = p_pos
        return out

    # --- records --------------------------------------------------------------------------------
    def fitted_state(self) -> dict[str, Any]:
        if not self.is_fitted:
            return {}
        top = {}
        for h, b in self.boosters_.items():
            gain = b.feature_importance("gain")
            order = np.argsort(gain)[::-1][:10]
            top[str(h)] = [[self.feature_names_[i], round(float(gain[i]), 2)] for i in order]
        state = {k: {str(h): s[k] for h, s in self.state_.items()}
                 for k in ("power", "rounds", "alpha", "alpha_source", "validation_rows", "validation_deviance")}
        state.update(feature_importance_top10=top, features=self.feature_names_, origin_rho=self.origin_rho_,
                     quantile_method=self.quantile_method, learning_rate=self.learning_rate)
        if self.interval_method == "conformal":
            state["conformal"] = self.calibrators_.metadata()
        return state

    def save_artifacts(self, directory) -> list[str]:  # noqa: ANN001 - a pathlib.Path
        """One LightGBM text model per horizon; reload with `lightgbm.Booster(model_file=...)`."""
        directory = Path(directory)
        directory.mkdir(parents=True, exist_ok=True)
        names = []
        for h, booster in sorted(self.boosters_.items()):
            name = f"tweedie_gbm_h{h}.txt"
            booster.save_model(str(directory / name))
            names.append(name)
        return names


def _stored(params: dict[str, Any] | None, horizon: int) -> dict[str, Any]:
    """Power and rounds for one horizon from a previous `fitted_state()` (keys may be str or int)."""
    if not params:
        return {}
    out = {}
    for key in ("power", "rounds"):
        value = params.get(key)
        if isinstance(value, dict):
            value = value.get(str(horizon), value.get(horizon))
        if value is None:
            raise ValueError(f"tweedie_gbm params: no stored {key!r} for horizon {horizon}; pass the full "
                             "fitted_state() of a previous fit, or tune=True to search again")
        out[key] = value
    if isinstance(params.get("learning_rate"), (int, float)):
        out["learning_rate"] = float(params["learning_rate"])
    alpha = params.get("alpha")
    alpha = alpha.get(str(horizon), alpha.get(horizon)) if isinstance(alpha, dict) else None
    if alpha:  # optional: only speeds up the dispersion search
        out["alpha"] = float(alpha)
    return out
