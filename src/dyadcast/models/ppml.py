"""PPML gravity model (pyfixest `fepois`) per horizon, with an NB2 predictive distribution.

Specification, for each horizon h (one regression per horizon, direct forecasting):

    target_h ~ log1p(lag_1) + log1p(roll_mean_3) + log1p(roll_mean_12) + push_* + pull_*
               + log_distance + contiguous + common_language + colonial_tie + log_diaspora
               | origin + destination + calendar month of the target

Why origin and destination effects rather than origin x time and destination x time: the time
effects of months after the cutoff are never estimated, so they could only be carried forward
by assumption. Origin, destination and target-month effects are time-invariant, so a forecast
uses exactly the estimated values; changes over time enter through the lags and push/pull
indicators. With origin + destination effects (no dyad effect) the dyad attributes such as
log_distance stay identified, so nothing needs dropping; pyfixest removes any other collinear
column and reports it in `fitted_state()`. A level unseen in training gets the average estimated
effect of its kind; a level pyfixest dropped for separation (all its targets zero) gets the lowest
estimated effect of its kind rather than minus infinity.

Standard errors are clustered by dyad (`vcov={"CRV1": "dyad"}`); they are recorded, not used for
forecasting. Quantiles and P(> 0) come from NB2(mean from PPML, alpha by 1-D ML on training rows).
Only dyads with a positive flow in the training window are fitted (as in the Poisson GLM); split
dormant dyads off before predicting (`dyadcast.models.dormant.split_dormant`).
"""

from __future__ import annotations

import warnings
from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from dyadcast.config import DEFAULT_QUANTILES
from dyadcast.distributions import fit_nb_alpha, nbinom_p_positive, nbinom_quantiles
from dyadcast.models.base import CountModel, quantile_column, target_column, target_months
from dyadcast.models.design import (
    Design,
    active_dyads,
    horizon_rows,
    in_dyads,
    present_columns,
    subsample,
    target_calendar_month,
)
from dyadcast.models.poisson_glm import MAX_ETA, write_coefficients

REGRESSORS_LOG1P = ("lag_1", "roll_mean_3", "roll_mean_12")
REGRESSORS_LEVEL = ("push_*", "pull_*", "log_distance", "contiguous", "common_language", "colonial_tie",
                    "log_diaspora")


@dataclass
class PPMLFit:
    coef: dict[str, float]
    se: dict[str, float]
    fixef: dict[str, dict[str, float]]
    fitted: np.ndarray  # response scale, one per row used in estimation
    y: np.ndarray
    dropped: list[str] = field(default_factory=list)
    n_obs: int = 0


def fit_ppml(data: pd.DataFrame, y: str, regressors: Sequence[str], fixed_effects: Sequence[str],
             vcov: str | dict[str, str] = "hetero", fixef_tol: float = 1e-8) -> PPMLFit:
    """fepois with explicit vcov and response-scale fitted values; regressor names must be formula-safe.

    Why a helper: the Fally (2015) check in the tests and the forecasting model run the same code.
    """
    import pyfixest as pf

    rhs = " + ".join(regressors) if regressors else "1"
    fml = f"{y} ~ {rhs} | {' + '.join(fixed_effects)}"
    frame = data[[y, *regressors, *fixed_effects, *_cluster_columns(vcov)]].copy()
    for fe in fixed_effects:
        frame[fe] = frame[fe].astype(str)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # pandas-3 FutureWarnings from inside pyfixest (models.md §1)
        fit = pf.fepois(fml, data=frame, vcov=vcov, fixef_tol=fixef_tol)
        fitted = np.asarray(fit.predict(type="response"), dtype=float)  # default is "link" (models.md §1)
        fixef = fit.fixef()
    coef = {k: float(v) for k, v in fit.coef().items()}
    se = {k: float(v) for k, v in fit.se().items()}
    clean = {name.removeprefix("C(").removesuffix(")"): {str(k): float(v) for k, v in values.items()}
             for name, values in fixef.items()}
    sample = fit._data if getattr(fit, "_data", None) is not None else frame
    for fe in fixed_effects:
        table = clean.setdefault(fe, {})
        for level in sample[fe].astype(str).unique():  # pyfixest omits one reference level per extra effect
            table.setdefault(level, 0.0)
        lowest = min(table.values()) if table else 0.0
        for level in set(frame[fe].unique()) - set(table):  # dropped for separation (all targets zero)
            table[level] = lowest
    used = sample[y].to_numpy(dtype=float)  # fit._Y holds the demeaned working response, not y
    if used.size != fitted.size:
        raise RuntimeError(f"fit_ppml: {fitted.size} fitted values for {used.size} estimation rows; "
                           "pyfixest's stored sample changed shape, check the installed version")
    return PPMLFit(coef=coef, se=se, fixef=clean, fitted=fitted, y=used,
                   dropped=[r for r in regressors if r not in coef], n_obs=int(fit._N))


def _cluster_columns(vcov: str | dict[str, str]) -> list[str]:
    if isinstance(vcov, dict):
        return [c.strip() for v in vcov.values() for c in v.split("+")]
    return []


def ppml_linear_predictor(fit: PPMLFit, X: pd.DataFrame, fe_values: dict[str, np.ndarray]) -> np.ndarray:
    """X beta + sum of fixed effects; unseen levels get the average effect of their kind."""
    eta = np.zeros(len(X))
    for name, b in fit.coef.items():
        eta += b * X[name].to_numpy(dtype=float)
    for fe, levels in fe_values.items():
        table = fit.fixef[fe]
        fallback = float(np.mean(list(table.values())))
        eta += np.array([table.get(str(v), fallback) for v in levels])
    return eta


class PPMLGravity(CountModel):
    name = "ppml_gravity"
    quantile_method = "parametric:nb2 (PPML mean, alpha by 1-D ML per horizon)"

    def __init__(self, horizon: int = 6, quantiles: Sequence[float] = DEFAULT_QUANTILES, seed: int = 0,
                 max_rows: int | None = 2_000_000, fixef_tol: float = 1e-8) -> None:
        super().__init__(horizon=horizon, quantiles=quantiles, seed=seed)
        self.max_rows = max_rows
        self.fixef_tol = fixef_tol

    def _frame(self, rows: pd.DataFrame, horizon: int, design: Design) -> tuple[pd.DataFrame, dict]:
        names = [f"x{i}" for i in range(len(design.names_))]  # formula-safe stand-ins for feature names
        X = pd.DataFrame(design.transform(rows, horizon), columns=names, index=rows.index)
        fe = {"origin": rows["origin"].astype(str).to_numpy(),
              "destination": rows["destination"].astype(str).to_numpy(),
              "target_month": target_calendar_month(rows, horizon).astype(str)}
        return X, fe

    def _fit(self, train: pd.DataFrame) -> None:
        active = train[in_dyads(train, active_dyads(train))]
        if active.empty:
            raise ValueError(f"{self.name}: no dyad has a positive flow in the training frame; "
                             "nothing to fit")
        self.designs_: dict[int, Design] = {}
        self.fits_: dict[int, PPMLFit] = {}
        self.alpha_: dict[int, float] = {}
        for h in range(1, self.horizon + 1):
            rows = subsample(horizon_rows(active, h), self.max_rows, self.seed + h)
            design = Design(log1p=REGRESSORS_LOG1P, numeric=present_columns(rows, REGRESSORS_LEVEL),
                            intercept=False).fit(rows, h)
            X, fe = self._frame(rows, h, design)
            dyad = (rows["origin"].astype(str) + ">" + rows["destination"].astype(str)).to_numpy()
            data = X.assign(y=rows[target_column(h)].to_numpy(dtype=float), **fe, dyad=dyad)
            fit = fit_ppml(data, "y", list(X.columns), list(fe), vcov={"CRV1": "dyad"},
                           fixef_tol=self.fixef_tol)
            self.designs_[h], self.fits_[h] = design, fit
            self.alpha_[h] = fit_nb_alpha(fit.y, fit.fitted)

    def predict_mean(self, rows: pd.DataFrame, horizon: int) -> np.ndarray:
        X, fe = self._frame(rows, horizon, self.designs_[horizon])
        return np.exp(np.minimum(ppml_linear_predictor(self.fits_[horizon], X, fe), MAX_ETA))

    def _predict_horizon(self, rows: pd.DataFrame, horizon: int) -> pd.DataFrame:
        mu = self.predict_mean(rows, horizon)
        alpha = self.alpha_[horizon]
        q = nbinom_quantiles(mu, alpha, self.quantiles)
        out = pd.DataFrame({
            "origin": rows["origin"].to_numpy(), "destination": rows["destination"].to_numpy(),
            "horizon": horizon, "target_month": target_months(rows, horizon).to_numpy(), "mean": mu,
        })
        for j, level in enumerate(self.quantiles):
            out[quantile_column(level)] = q[:, j]
        out["p_positive"] = nbinom_p_positive(mu, alpha)
        return out

    def _named(self, h: int, values: dict[str, float]) -> dict[str, float]:
        names = self.designs_[h].names_
        return {names[int(k[1:])]: v for k, v in values.items()}

    def fitted_state(self) -> dict[str, Any]:
        return {str(h): {
            "alpha": self.alpha_[h], "n_obs": f.n_obs, "coefficients": self._named(h, f.coef),
            "std_errors_crv1_dyad": self._named(h, f.se),
            "dropped_collinear": [self.designs_[h].names_[int(k[1:])] for k in f.dropped],
            "n_fixed_effects": {k: len(v) for k, v in f.fixef.items()},
        } for h, f in self.fits_.items()}

    def save_artifacts(self, directory) -> list[str]:  # noqa: ANN001 - a pathlib.Path
        directory = Path(directory)
        fits = {}
        for h, f in self.fits_.items():
            coef, se = self._named(h, f.coef), self._named(h, f.se)
            fits[h] = (list(coef), np.array(list(coef.values())), np.array([se[k] for k in coef]))
        names = [write_coefficients(directory, fits, self.alpha_)]
        records = [{"horizon": h, "effect": fe, "level": lvl, "estimate": v}
                   for h, f in self.fits_.items()
                   for fe, table in f.fixef.items() for lvl, v in table.items()]
        pd.DataFrame.from_records(records).to_csv(directory / "fixed_effects.csv", index=False)
        return [*names, "fixed_effects.csv"]
