"""Poisson GLM per horizon (the walking-skeleton model) with an NB2 predictive distribution.

For each horizon h: target_h ~ log1p(lag_1) + log1p(roll_mean_3) + log1p(roll_mean_12)
+ origin + destination + calendar month of the target, fitted by statsmodels GLM(Poisson) with
Newton steps (IRLS in statsmodels 0.15 runs an SVD per iteration and is 10x slower here, see
/work/shared/notes/models.md §1). Only dyads with a positive flow somewhere in the training window
are fitted: all-zero dyads are the dormant forecaster's job, and they would push the origin and
destination effects towards -inf. Forecasts for such dyads are extrapolations (in simulation their
P(> 0) came out near 0.45 for flows that stayed at zero), so split them off first
(`dyadcast.models.dormant.split_dormant`). An origin or destination unseen in training gets the
average effect.

Poisson intervals are far too narrow for these counts (models.md §3: 90 % coverage 0.71 on
positive flows), so quantiles and P(> 0) come from NB2(mean from the GLM, alpha) with alpha fitted
by 1-D maximum likelihood on the training rows given the GLM means.
"""

from __future__ import annotations

import warnings
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from dyadcast.config import DEFAULT_QUANTILES
from dyadcast.distributions import fit_nb_alpha, nbinom_p_positive, nbinom_quantiles
from dyadcast.models.base import CountModel, quantile_column, target_column, target_months
from dyadcast.models.design import Design, active_dyads, horizon_rows, in_dyads, subsample

MAX_ETA = 30.0  # exp(30) ~ 1e13 arrivals: anything larger is a numerical accident, not a forecast


@dataclass
class PoissonFit:
    names: list[str]
    params: np.ndarray
    bse: np.ndarray
    fitted: np.ndarray
    deviance: float
    df_resid: float
    llf: float
    converged: bool
    method: str


def fit_poisson_glm(X: np.ndarray, y: np.ndarray, names: Sequence[str], maxiter: int = 100) -> PoissonFit:
    """Poisson GLM by Newton from a constant-only start; falls back to IRLS if Newton does not converge.

    Column 0 of X must be the intercept (as `Design` builds it): the start sets it to log(mean y).
    """
    import statsmodels.api as sm

    y = np.asarray(y, dtype=float)
    if np.any(~np.isfinite(y)) or np.any(y < 0):
        raise ValueError("fit_poisson_glm: targets must be finite and >= 0; "
                         "drop rows with a NaN target first")
    if y.sum() <= 0:
        raise ValueError(f"fit_poisson_glm: all {y.size} targets are zero; "
                         "a Poisson mean cannot be estimated")
    model = sm.GLM(y, X, family=sm.families.Poisson())
    start = np.zeros(X.shape[1])
    start[0] = np.log(y.mean())
    method = "newton"
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        res = model.fit(method="newton", max_start_irls=0, start_params=start, maxiter=maxiter)
        converged = bool(res.mle_retvals.get("converged", False) and np.isfinite(res.llf))
        if not converged:
            method = "irls"
            res = model.fit(maxiter=maxiter)
            converged = bool(getattr(res, "converged", False) and np.isfinite(res.llf))
    return PoissonFit(names=list(names), params=np.asarray(res.params), bse=np.asarray(res.bse),
                      fitted=np.asarray(res.fittedvalues), deviance=float(res.deviance),
                      df_resid=float(res.df_resid), llf=float(res.llf), converged=converged, method=method)


class PoissonGLM(CountModel):
    name = "poisson_glm"
    quantile_method = "parametric:nb2 (GLM mean, alpha by 1-D ML per horizon)"

    def __init__(self, horizon: int = 6, quantiles: Sequence[float] = DEFAULT_QUANTILES, seed: int = 0,
                 max_rows: int | None = 500_000) -> None:
        super().__init__(horizon=horizon, quantiles=quantiles, seed=seed)
        self.max_rows = max_rows

    def _fit(self, train: pd.DataFrame) -> None:
        active = train[in_dyads(train, active_dyads(train))]
        if active.empty:
            raise ValueError(f"{self.name}: no dyad has a positive flow in the training frame; "
                             "nothing to fit")
        self.designs_: dict[int, Design] = {}
        self.fits_: dict[int, PoissonFit] = {}
        self.alpha_: dict[int, float] = {}
        for h in range(1, self.horizon + 1):
            rows = subsample(horizon_rows(active, h), self.max_rows, self.seed + h)
            design = Design(log1p=("lag_1", "roll_mean_3", "roll_mean_12"),
                            categorical=("origin", "destination"), season="dummies").fit(rows, h)
            y = rows[target_column(h)].to_numpy(dtype=float)
            fit = fit_poisson_glm(design.transform(rows, h), y, design.names_)
            if not fit.converged:
                warnings.warn(f"{self.name} horizon {h}: GLM did not converge by Newton or IRLS; "
                              "forecasts use the last iterate", stacklevel=2)
            self.designs_[h], self.fits_[h] = design, fit
            self.alpha_[h] = fit_nb_alpha(y, fit.fitted)

    def predict_mean(self, rows: pd.DataFrame, horizon: int) -> np.ndarray:
        X = self.designs_[horizon].transform(rows, horizon)
        return np.exp(np.minimum(X @ self.fits_[horizon].params, MAX_ETA))

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

    def fitted_state(self) -> dict[str, Any]:
        return {str(h): {
            "alpha": self.alpha_[h], "converged": f.converged, "method": f.method, "deviance": f.deviance,
            "n_rows": int(f.fitted.size),
            "coefficients": dict(zip(f.names, map(float, f.params), strict=True)),
        } for h, f in self.fits_.items()}

    def save_artifacts(self, directory) -> list[str]:  # noqa: ANN001 - a pathlib.Path
        fits = {h: (f.names, f.params, f.bse) for h, f in self.fits_.items()}
        return [write_coefficients(Path(directory), fits, self.alpha_)]


def write_coefficients(directory: Path, fits: dict[int, tuple[Sequence[str], np.ndarray, np.ndarray]],
                       alpha: dict[int, float], file_name: str = "coefficients.csv") -> str:
    """One CSV row per horizon and term (plus the NB alpha): readable without Python."""
    records = []
    for h, (names, params, bse) in fits.items():
        records += [{"horizon": h, "term": n, "estimate": float(p), "std_error": float(s)}
                    for n, p, s in zip(names, params, bse, strict=True)]
        records.append({"horizon": h, "term": "nb_alpha", "estimate": alpha[h], "std_error": np.nan})
    directory.mkdir(parents=True, exist_ok=True)
    pd.DataFrame.from_records(records).to_csv(directory / file_name, index=False)
    return file_name
