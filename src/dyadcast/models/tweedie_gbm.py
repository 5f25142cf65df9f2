"""One global LightGBM model with a Tweedie objective, one booster per horizon (direct multi-horizon).

Why one booster per horizon rather than horizon as a feature: stacking H copies of the frame multiplies
memory by H for one model, while H boosters each see the frame once, can stop at their own number of
rounds and get their own dispersion; total training rows are the same.

"fit" mode (`tune=True`, or no `params`), per horizon h (rows whose target_h is known):
* time-based validation: the last `validation_months` anchor months are held out; the fit part keeps only
  anchors t with t + h <= the first held-out anchor, so no target it learns from lies after that month;
* the Tweedie variance power is chosen from `power_grid` (with `tune`) by mean Poisson deviance on the
  held-out months of horizon 1 (deviance with power 1 compares candidates on one scale) and shared by all
  horizons: it describes how the variance grows with the mean, which does not depend on the horizon.
  Rounds come from early stopping per horizon. Without `tune`: `default_power`;
* the predictive distribution is NB2 around the predicted mean, alpha fitted by ML on the held-out
  residuals (models.md section 3: this calibrated better than Tweedie simulation or quantile objectives),
  or split-conformal quantiles on the same residuals with `interval_method="conformal"`;
* the final booster is refitted on every known row with the chosen power and rounds.

"refresh" mode (`tune=False, params=<a previous fitted_state()>`), two ways, recorded as `refresh_method`:
* "continued", when last month's boosters are found (`params["artifacts_dir"]`: that snapshot's artifacts
  folder): each booster gets `refresh_rounds` more rounds at `refresh_learning_rate` on the rows whose target
  month is newer than the newest target it learnt (one month of rows), so the cost follows the new data.
  Alpha stays honest: last month's booster never saw those target months, so its errors there are genuine
  out-of-sample errors at horizon h; the month's ML alpha enters a running estimate with weight
  1 / `validation_months` (the six held-out months of a fit, renewed one month at a time). origin_rho is
  carried over. A fit or a "refitted" refresh restarts the chain; after `max_continuations` months in a row,
  a gap longer than `validation_months`, another feature set or learning rate, conformal intervals or a
  state from before continuation existed, the refresh is "refitted" instead;
* "refitted": as "fit" with the stored power and rounds (no search, no early stopping).

Cost (bench/tweedie_cost.py, 40,000 dyads, 72 % zero targets among the active rows): zero-target rows beyond
`max_zero_rows` per horizon are dropped at random (seeded) and the kept ones weighted by 1 / share: the
weighted loss is an unbiased estimate of the full one at a fraction of the per-round cost. The feature matrix
is built once per fit and each horizon binned once (`lgb.Dataset`; the fit part is a subset of it).
Defaults (learning rate 0.1, 15 leaves, 63 bins) scored a pooled WIS of 56.4 on the demo frame against 60.3
for 0.05 / 31 leaves / 255 bins (`bench/models_demo.py --score`). Continuing with 10 rounds at 0.03 scored
as well as refitting, month after month for a year, on the full-scale benchmark panel; at 0.1 or with more
rounds the boosters chased single months (numbers in bench/README.md).

Features: every numeric column except keys and targets, the target's calendar month, and origin and
destination as LightGBM categoricals (codes fixed at fit and kept through continued refreshes; unseen
countries become missing).
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
from dyadcast.models.design import target_calendar_month
from dyadcast.snapshots import ARTIFACTS_KEY

CATEGORICAL = ("origin", "destination")
CONTINUATION_KEYS = ("categories", "last_target_month", "features", "alpha")


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


def booster_file(horizon: int) -> str:
    return f"tweedie_gbm_h{horizon}.txt"


class TweedieGBM(CountModel):
    name = "tweedie_gbm"
    continues_from_artifacts = True  # cycle.model_options passes the stored boosters' folder (ARTIFACTS_KEY)
    quantile_method = "parametric:nb-on-gbm-mean"

    def __init__(self, horizon: int = 6, quantiles: Sequence[float] = DEFAULT_QUANTILES, seed: int = 0,
                 tune: bool = True, params: dict[str, Any] | None = None,
                 power_grid: Sequence[float] = (1.1, 1.3, 1.5), default_power: float = 1.3,
                 validation_months: int = 6, learning_rate: float = 0.1, num_leaves: int = 15,
                 min_data_in_leaf: int = 50, max_rounds: int = 300, early_stopping_rounds: int = 15,
                 num_threads: int = 1, interval_method: str = "nb", max_bin: int = 63,
                 max_zero_rows: int | None = 150_000, refresh_rounds: int = 5,
                 refresh_learning_rate: float = 0.03, max_continuations: int = 12) -> None:
        super().__init__(horizon=horizon, quantiles=quantiles, seed=seed)
        if interval_method not in ("nb", "conformal"):
            raise ValueError(f"TweedieGBM: interval_method={interval_method!r}; use 'nb' or 'conformal'")
        if max_zero_rows is not None and max_zero_rows < 1:
            raise ValueError(f"TweedieGBM: max_zero_rows={max_zero_rows}; use a positive row count or None (keep all)")
        self.tune, self.params = tune, params
        self.power_grid, self.default_power = tuple(power_grid), default_power
        self.validation_months, self.learning_rate = validation_months, learning_rate
        self.num_leaves, self.min_data_in_leaf = num_leaves, min_data_in_leaf
        self.max_rounds, self.early_stopping_rounds = max_rounds, early_stopping_rounds
        self.max_bin, self.max_zero_rows = max_bin, max_zero_rows
        self.refresh_rounds, self.refresh_learning_rate = refresh_rounds, refresh_learning_rate
        self.max_continuations = max_continuations
        # Capped at 2. Default 1: on the shared 2-core box, 2 OpenMP threads ran 10-20x slower under load.
        self.num_threads = max(1, min(int(num_threads), 2))
        self.interval_method = interval_method
        if interval_method == "conformal":
            self.quantile_method = ConformalCalibrator(self.quantiles).method + "-on-gbm-mean"

    # --- design ---------------------------------------------------------------------------------
    def _lgb_params(self, power: float, learning_rate: float | None = None) -> dict[str, Any]:
        return {"objective": "tweedie", "tweedie_variance_power": power,
                "learning_rate": learning_rate or self.learning_rate, "num_leaves": self.num_leaves,
                "min_data_in_leaf": self.min_data_in_leaf, "feature_fraction": 0.7, "max_bin": self.max_bin,
                "num_threads": self.num_threads, "seed": self.seed, "deterministic": True, "force_row_wise": True,
                "verbose": -1}

    def _design(self, frame: pd.DataFrame, horizon: int) -> np.ndarray:
        """float32 matrix in `feature_names_` order; horizon 0 puts the anchor's own calendar month."""
        x = np.empty((len(frame), len(self.feature_names_)), dtype=np.float32)
        for j, c in enumerate(self.numeric_):
            x[:, j] = frame[c].to_numpy(dtype=float) if c in frame.columns else np.nan
        x[:, len(self.numeric_)] = target_calendar_month(frame, horizon)
        for j, c in enumerate(CATEGORICAL, start=len(self.numeric_) + 1):
            codes = pd.Categorical(frame[c], categories=self.categories_[c]).codes.astype(float)
            x[:, j] = np.where(codes < 0, np.nan, codes)
        return x

    def _rows(self, base: np.ndarray, index: np.ndarray, horizon: int) -> np.ndarray:
        """Rows of the fit's anchor-month matrix with the target's calendar month for this horizon."""
        x = base[index]
        col = len(self.numeric_)
        x[:, col] = (x[:, col] - 1 + horizon) % 12 + 1
        return x

    def _dataset(self, x: np.ndarray, y: np.ndarray, weight: np.ndarray | None = None,
                 reference: lgb.Dataset | None = None) -> lgb.Dataset:
        """Binned once per horizon; the fit part is a subset sharing its bins (binning cost ~60 rounds here).

        The bins use the feature values of the rows (never the targets); a `reference` lends its bins.
        """
        params = {"max_bin": self.max_bin, "min_data_in_leaf": self.min_data_in_leaf, "verbose": -1,
                  "num_threads": self.num_threads, "seed": self.seed, "deterministic": True}
        return lgb.Dataset(x, y, weight=weight, feature_name=self.feature_names_,
                           categorical_feature=list(CATEGORICAL), params=params, free_raw_data=False,
                           reference=reference)

    def _train(self, data: lgb.Dataset, power: float, rounds: int, valid: lgb.Dataset | None = None,
               init_model: lgb.Booster | None = None, learning_rate: float | None = None) -> lgb.Booster:
        kwargs: dict[str, Any] = {}
        if valid is not None:
            kwargs = {"valid_sets": [valid], "callbacks": [lgb.early_stopping(self.early_stopping_rounds,
                                                                              verbose=False)]}
        return lgb.train(self._lgb_params(power, learning_rate), data, num_boost_round=rounds,
                         keep_training_booster=False, init_model=init_model, **kwargs)

    def _thin(self, y: np.ndarray, horizon: int) -> tuple[np.ndarray, np.ndarray, float]:
        """Keep every positive row and about `max_zero_rows` zero rows (seeded), weighted 1 / share.

        Why: zero targets are 72 % of the active rows at full scale and cost as much per round as the rest;
        with weights the expected loss and gradients are those of all rows, so the mean stays calibrated.
        """
        zero = y == 0
        n_zero = int(zero.sum())
        if self.max_zero_rows is None or n_zero <= self.max_zero_rows:
            return np.ones(y.size, bool), np.ones(y.size), 1.0
        share = self.max_zero_rows / n_zero
        keep = ~zero | (np.random.default_rng([self.seed, horizon]).random(y.size) < share)
        return keep, np.where(zero, 1.0 / share, 1.0), share

    def _split(self, month_no: np.ndarray, horizon: int) -> tuple[np.ndarray, np.ndarray]:
        """(fit part, held-out part) over rows with anchor months `month_no` (months since year 0)."""
        anchors = np.unique(month_no)
        if anchors.size < self.validation_months + horizon + 6:
            return np.ones(month_no.size, bool), np.zeros(month_no.size, bool)
        first_valid = anchors[-self.validation_months]
        return month_no + horizon <= first_valid, month_no >= first_valid

    # --- fit ------------------------------------------------------------------------------------
    def _fit(self, train: pd.DataFrame) -> None:
        skip = {"origin", "destination", "month", "calendar_month"}
        self.numeric_ = [c for c in train.columns if c not in skip and not c.startswith("target_")
                         and pd.api.types.is_numeric_dtype(train[c])]
        self.feature_names_ = [*self.numeric_, "target_calendar_month", *CATEGORICAL]
        self.boosters_: dict[int, lgb.Booster] = {}
        self.state_: dict[int, dict[str, Any]] = {}
        self.calibrators_ = ConformalCalibrator(self.quantiles)
        self.validation_: dict[int, tuple[np.ndarray, np.ndarray]] = {}  # held-out (y, mu) per horizon
        self.chosen_power_: float | None = None
        month_no = _month_numbers(train["month"])
        targets, known = {}, {}
        for h in range(1, self.horizon + 1):
            targets[h] = train[target_column(h)].to_numpy(dtype=float)
            known[h] = np.flatnonzero(~np.isnan(targets[h]))
            if known[h].size == 0:
                raise ValueError(f"tweedie_gbm: no training row has a known {target_column(h)}; "
                                 f"the training window must reach at least {h} months before the cutoff")
        newest = {h: int(month_no[known[h]].max()) + h for h in known}
        previous, self.refresh_note_ = self._previous_boosters(newest)
        continuing = bool(previous)
        self.categories_ = ({c: list(self.params["categories"][c]) for c in CATEGORICAL} if continuing
                            else {c: sorted(train[c].astype(str).unique()) for c in CATEGORICAL})
        self.refresh_method_ = "continued" if continuing else ("refitted" if self.params else "fit")
        self.continuations_ = int(self.params.get("continuations", 0)) + 1 if continuing else 0
        base = self._design(train, 0)
        origin = train["origin"].to_numpy()
        resid_parts = []
        for h in range(1, self.horizon + 1):
            if continuing:
                self._continue_horizon(h, base, month_no, targets[h], known[h], previous[h])
                continue
            resid = self._fit_horizon(h, base, month_no, targets[h], known[h], origin)
            if resid is not None:
                resid_parts.append(resid)
        if continuing:
            self.origin_rho_ = dict(self.params.get("origin_rho") or {})
            return
        # within-origin dependence of held-out errors, per horizon (shocks accumulate with the horizon);
        # pass it to dyadcast.totals.aggregate_totals(rho=...)
        self.origin_rho_ = {str(r["h"].iloc[0]): estimate_origin_rho(r["y"], r["mu"], r["alpha"], r["origin"],
                                                                     r["period"]) for r in resid_parts}

    def _fit_horizon(self, h: int, base: np.ndarray, month_no: np.ndarray, y_all: np.ndarray, known: np.ndarray,
                     origin: np.ndarray) -> pd.DataFrame | None:
        """Fit (or refit with stored power and rounds) one horizon; returns its held-out residual frame."""
        stored = _stored(self.params, h)
        if stored and stored.get("learning_rate", self.learning_rate) != self.learning_rate:
            stored = {"power": stored["power"]}  # rounds learned at another rate do not carry over: stop early
        months, y = month_no[known], y_all[known]
        fit, valid = self._split(months, h)
        keep, weight, share = self._thin(y, h)
        kept = np.flatnonzero(keep)
        data = self._dataset(self._rows(base, known[kept], h), y[kept], weight[kept] if share < 1 else None)
        data.construct()
        extra = {"last_target_month": _month_text(int(months.max()) + h), "zero_rows_kept_share": round(share, 6)}
        if not valid.any() or not fit.any():  # too short to hold months out: in-sample dispersion, flagged
            power = stored.get("power", self.default_power)
            rounds = int(stored.get("rounds", min(self.max_rounds, 100)))
            self.boosters_[h] = booster = self._train(data, power, rounds)
            mu = booster.predict(data.get_data(), num_threads=self.num_threads)
            alpha = fit_nb_alpha(y[kept], mu, weights=weight[kept])
            self.state_[h] = {"power": power, "rounds": rounds, "alpha": alpha, "alpha_source": "in-sample",
                              "validation_rows": 0, "validation_deviance": {}, **extra}
            return None
        part = data.subset(np.flatnonzero(fit[kept]).tolist())
        held_rows = np.flatnonzero(valid)
        held_x, held_y = self._rows(base, known[held_rows], h), y[held_rows]
        if stored:
            candidates = [float(stored["power"])]
        elif self.tune and self.chosen_power_ is None:
            candidates = list(self.power_grid)
        else:
            candidates = [self.chosen_power_ or self.default_power]
        fixed_rounds = int(stored["rounds"]) if "rounds" in stored else None
        held = self._dataset(held_x, held_y, reference=data) if fixed_rounds is None else None
        deviance, fitted = {}, {}
        for p in candidates:
            if fixed_rounds is not None:
                booster = self._train(part, p, fixed_rounds)
            else:
                booster = self._train(part, p, self.max_rounds, valid=held)
            mu = booster.predict(held_x, num_threads=self.num_threads)
            deviance[p] = mean_tweedie_deviance(held_y, np.maximum(mu, 1e-9), 1.0)
            fitted[p] = (booster, mu)
        power = min(deviance, key=deviance.get)
        self.chosen_power_ = self.chosen_power_ or (power if self.tune and not stored else None)
        booster, mu = fitted[power]
        rounds = max(1, fixed_rounds or int(booster.current_iteration()))
        alpha = fit_nb_alpha(held_y, mu, start=stored.get("alpha"))
        if self.interval_method == "conformal":
            self.calibrators_.fit(held_y, mu, h)
        self.validation_[h] = (held_y, mu)
        self.boosters_[h] = self._train(data, power, rounds)
        self.state_[h] = {"power": power, "rounds": rounds, "alpha": alpha, "alpha_source": "validation",
                          "validation_rows": int(held_rows.size),
                          "validation_deviance": {str(p): round(d, 6) for p, d in deviance.items()}, **extra}
        return pd.DataFrame({"h": h, "y": held_y, "mu": mu, "alpha": alpha, "origin": origin[known[held_rows]],
                             "period": months[held_rows]})

    # --- refresh by continuation ----------------------------------------------------------------
    def _previous_boosters(self, newest: dict[int, int]) -> tuple[dict[int, lgb.Booster], str]:
        """Last month's boosters when they can be continued, else {} and the reason (recorded)."""
        params = self.params or {}
        if not params:
            return {}, ""
        why = _not_continuable(params, self)
        if why:
            return {}, why
        if list(params["features"]) != self.feature_names_:
            return {}, "the feature columns differ from last month's; refitted"
        gap = max(newest[h] - _month_number(_by_horizon(params["last_target_month"], h)) for h in newest)
        if gap > self.validation_months:
            return {}, f"{gap} months of new targets since the stored boosters were trained; refitted"
        folder = Path(params[ARTIFACTS_KEY])
        boosters = {}
        for h in newest:
            path = folder / booster_file(h)
            if not path.is_file():
                return {}, f"{path} not found; refitted"
            booster = lgb.Booster(model_file=str(path))
            expected = _by_horizon(params.get("booster_rounds"), h)
            if expected is not None and booster.current_iteration() != int(expected):
                return {}, f"{path} has {booster.current_iteration()} rounds where the state says {expected}; refitted"
            boosters[h] = booster
        return boosters, ""

    def _continue_horizon(self, h: int, base: np.ndarray, month_no: np.ndarray, y_all: np.ndarray,
                          known: np.ndarray, booster: lgb.Booster) -> None:
        """Boost `refresh_rounds` more rounds on rows with a target newer than the booster's newest target."""
        stored = _stored(self.params, h)
        last = _month_number(stored["last_target_month"])
        new = known[month_no[known] + h > last]
        power, alpha = float(stored["power"]), float(stored["alpha"])
        state = {"power": power, "rounds": int(stored["rounds"]), "alpha": alpha,
                 "alpha_source": stored.get("alpha_source", "validation"), "validation_rows": 0,
                 "validation_deviance": {}, "last_target_month": _month_text(last), "zero_rows_kept_share": 1.0}
        if new.size:
            x, y = self._rows(base, new, h), y_all[new]
            mu = np.maximum(booster.predict(x, num_threads=self.num_threads), 1e-9)  # out of sample: honest
            weight_new = min(1.0, np.unique(month_no[new]).size / self.validation_months)
            month_alpha = fit_nb_alpha(y, mu, start=alpha)
            alpha = float(np.exp((1 - weight_new) * np.log(alpha) + weight_new * np.log(month_alpha)))
            keep, weight, share = self._thin(y, h)
            if self.refresh_rounds > 0:
                data = self._dataset(x[keep], y[keep], weight[keep] if share < 1 else None)
                booster = self._train(data, power, self.refresh_rounds, init_model=booster,
                                      learning_rate=self.refresh_learning_rate)
            self.validation_[h] = (y, mu)
            state.update(alpha=alpha, alpha_source="validation, updated with out-of-sample errors",
                         validation_rows=int(new.size),
                         validation_deviance={str(power): round(mean_tweedie_deviance(y, mu, 1.0), 6)},
                         last_target_month=_month_text(int(month_no[new].max()) + h),
                         zero_rows_kept_share=round(share, 6))
        self.boosters_[h], self.state_[h] = booster, state

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
                 for k in ("power", "rounds", "alpha", "alpha_source", "validation_rows", "validation_deviance",
                           "last_target_month", "zero_rows_kept_share")}
        state.update(feature_importance_top10=top, features=self.feature_names_, origin_rho=self.origin_rho_,
                     quantile_method=self.quantile_method, learning_rate=self.learning_rate,
                     booster_rounds={str(h): int(b.current_iteration()) for h, b in self.boosters_.items()},
                     refresh_method=self.refresh_method_, continuations=self.continuations_,
                     refresh_note=self.refresh_note_, categories=self.categories_,
                     refresh_from=(self.params or {}).get(ARTIFACTS_KEY) if self.continuations_ else None)
        if self.interval_method == "conformal":
            state["conformal"] = self.calibrators_.metadata()
        return state

    def save_artifacts(self, directory) -> list[str]:  # noqa: ANN001 - a pathlib.Path
        """One LightGBM text model per horizon; reload with `lightgbm.Booster(model_file=...)`; a refresh
        continues them when the cycle passes their folder as `params["artifacts_dir"]`."""
        directory = Path(directory)
        directory.mkdir(parents=True, exist_ok=True)
        names = []
        for h, booster in sorted(self.boosters_.items()):
            name = booster_file(h)
            booster.save_model(str(directory / name))
            names.append(name)
        return names


def _by_horizon(value: Any, horizon: int) -> Any:
    return value.get(str(horizon), value.get(horizon)) if isinstance(value, dict) else None


def _stored(params: dict[str, Any] | None, horizon: int) -> dict[str, Any]:
    """Power and rounds (and, when present, alpha and the newest target learnt) for one horizon from a
    previous `fitted_state()`; keys may be str or int. States written before continuation existed load too."""
    if not params:
        return {}
    out = {}
    for key in ("power", "rounds"):
        value = params.get(key)
        if isinstance(value, dict):
            value = _by_horizon(value, horizon)
        if value is None:
            raise ValueError(f"tweedie_gbm params: no stored {key!r} for horizon {horizon}; pass the full "
                             "fitted_state() of a previous fit, or tune=True to search again")
        out[key] = value
    if isinstance(params.get("learning_rate"), (int, float)):
        out["learning_rate"] = float(params["learning_rate"])
    alpha = _by_horizon(params.get("alpha"), horizon)
    if alpha:  # optional: a start for the dispersion search (and the running alpha of a continuation)
        out["alpha"] = float(alpha)
    for key in ("alpha_source", "last_target_month"):
        value = _by_horizon(params.get(key), horizon)
        if value is not None:
            out[key] = value
    return out


def _not_continuable(params: dict[str, Any], model: TweedieGBM) -> str:
    """Why last month's boosters cannot be continued ('' when they can); recorded as `refresh_note`."""
    if not params.get(ARTIFACTS_KEY):
        return "no stored boosters given (params['artifacts_dir']); refitted with the stored power and rounds"
    missing = [k for k in CONTINUATION_KEYS if not params.get(k)]
    if missing:
        return f"the stored state predates continued refreshes (no {missing}); refitted"
    if model.interval_method != "nb":
        return "conformal intervals need a fresh held-out split; refitted"
    if float(params.get("learning_rate", model.learning_rate)) != model.learning_rate:
        return "the learning rate changed; refitted"
    if int(params.get("continuations", 0)) >= model.max_continuations:
        return f"{model.max_continuations} continued months in a row; refitted"
    return ""


def _month_numbers(months: pd.Series) -> np.ndarray:
    """Months since year 0 (integer), so month arithmetic on millions of rows is integer arithmetic."""
    stamps = pd.DatetimeIndex(pd.to_datetime(months))
    return (stamps.year * 12 + stamps.month - 1).to_numpy(dtype=np.int64)


def _month_number(text: str) -> int:
    stamp = pd.Timestamp(text)
    return stamp.year * 12 + stamp.month - 1


def _month_text(number: int) -> str:
    return f"{number // 12:04d}-{number % 12 + 1:02d}-01"
