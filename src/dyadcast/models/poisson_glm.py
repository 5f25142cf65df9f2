"""Poisson GLM per horizon (the walking-skeleton model) with an NB2 predictive distribution.

For each horizon h: target_h ~ log1p(lag_1) + log1p(roll_mean_3) + log1p(roll_mean_12)
+ origin + destination + calendar month of the target, fitted by damped Newton on the Poisson
likelihood (`dyadcast.models.mle`; statsmodels' GLM Newton took ~0.5 s CPU per horizon on the demo frame,
mostly in its own per-iteration overhead, this ~0.1 s; statsmodels IRLS remains the fallback). "Refresh"
mode (`tune=False, params=<previous fitted_state()>`) starts Newton from last month's coefficients,
matched by name, and the NB alpha search from last month's alpha: same optimum, 1-3 steps. Only dyads
with a positive flow somewhere in the training window are fitted: all-zero dyads are the dormant forecaster's job, and they would push the origin and
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
from dyadcast.models import mle
from dyadcast.models.base import CountModel, forecast_frame, target_column
from dyadcast.models.design import Design, active_dyads, horizon_rows, in_dyads, subsample
from dyadcast.models.mle import ModelFallbackWarning, start_from

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
    iterations: int = 0


def fit_poisson_glm(X: np.ndarray, y: np.ndarray, names: Sequence[str], maxiter: int = 100,
                    start: np.ndarray | None = None) -> PoissonFit:
    """Poisson GLM (log link) by damped Newton (`dyadcast.models.mle`); statsmodels IRLS if that fails.

    Column 0 of X must be the intercept (as `Design` builds it). `start`: coefficients of a previous fit
    ("refresh" mode; converges in 2-3 steps), else the least-squares start on log((y + mean y) / 2).
    """
    y = np.asarray(y, dtype=float)
    if np.any(~np.isfinite(y)) or np.any(y < 0):
        raise ValueError("fit_poisson_glm: targets must be finite and >= 0; "
                         "drop rows with a NaN target first")
    if y.sum() <= 0:
        raise ValueError(f"fit_poisson_glm: all {y.size} targets are zero; "
                         "a Poisson mean cannot be estimated")
    first = start if start is not None and start.size == X.shape[1] else mle.log_link_start(y, X)
    try:
        res = mle.maximize(mle.Poisson(y), [X], first, "Poisson GLM", maxiter=maxiter)
        params, bse, llf, converged, method, iterations = (res.params, res.bse, res.llf, True, "newton",
                                                           res.iterations)
    except mle.FitFailed:
        import statsmodels.api as sm

        with warnings.catch_warnings(), np.errstate(all="ignore"):
            warnings.simplefilter("ignore")
            sm_res = sm.GLM(y, X, family=sm.families.Poisson()).fit(maxiter=maxiter)
        params, bse, llf = np.asarray(sm_res.params), np.asarray(sm_res.bse), float(sm_res.llf)
        converged = bool(getattr(sm_res, "converged", False) and np.isfinite(llf))
        method, iterations = "irls", int(getattr(sm_res, "fit_history", {}).get("iteration", 0))
    with np.errstate(over="ignore"):
        fitted = np.exp(np.minimum(X @ params, MAX_ETA))
    deviance = 2.0 * float(np.sum(np.where(y > 0, y * np.log(np.where(y > 0, y, 1.0) / fitted), 0.0) - (y - fitted)))
    return PoissonFit(names=list(names), params=params, bse=bse, fitted=fitted, deviance=deviance,
                      df_resid=float(y.size - X.shape[1]), llf=llf, converged=converged, method=method,
                      iterations=iterations)


class PoissonGLM(CountModel):
    name = "poisson_glm"
    quantile_method = "parametric:nb2 (GLM mean, alpha by 1-D ML per horizon)"

    def __init__(self, horizon: int = 6, quantiles: Sequence[float] = DEFAULT_QUANTILES, seed: int = 0,
                 max_rows: int | None = 500_000, tune: bool = True, params: dict[str, Any] | None = None) -> None:
        super().__init__(horizon=horizon, quantiles=quantiles, seed=seed)
        self.max_rows = max_rows
        # "refresh" (tune=False with a previous fitted_state()): Newton starts from last month's coefficients
        self.tune, self.params = tune, params

    def _fit(self, train: pd.DataFrame) -> None:
        active = train[in_dyads(train, active_dyads(train))]
        if active.empty:
            raise ValueError(f"{self.name}: no dyad has a positive flow in the training frame; "
                             "nothing to fit")
        self.designs_: dict[int, Design] = {}
        self.fits_: dict[int, PoissonFit] = {}
        self.alpha_: dict[int, float] = {}
        self.starts_: dict[int, str] = {}
        self.rows_available_: dict[int, int] = {}
        stored = {} if self.tune or not self.params else self.params
        notes = []
        for h in range(1, self.horizon + 1):
            available = horizon_rows(active, h)
            rows = subsample(available, self.max_rows, self.seed + h)
            design = Design(log1p=("lag_1", "roll_mean_3", "roll_mean_12"),
                            categorical=("origin", "destination"), season="dummies")
            X = design.fit_transform(rows, h)
            y = rows[target_column(h)].to_numpy(dtype=float)
            previous = stored.get(str(h)) or {}
            start, matched = start_from(design.names_, previous.get("coefficients"), np.zeros(len(design.names_)))
            fit = fit_poisson_glm(X, y, design.names_, start=start if matched else None)
            if fit.method != "newton":
                notes.append(f"{self.name} horizon {h}: Newton failed; fell back to statsmodels IRLS"
                             + ("" if fit.converged else ", which did not converge either (last iterate used)"))
            self.designs_[h], self.fits_[h] = design, fit
            self.starts_[h] = f"previous fit ({matched} of {len(design.names_)} terms)" if matched else "cold"
            self.rows_available_[h] = len(available)
            self.alpha_[h] = fit_nb_alpha(y, fit.fitted, start=previous.get("alpha"))
        if notes:
            warnings.warn(" | ".join(notes), ModelFallbackWarning, stacklevel=3)

    def predict_mean(self, rows: pd.DataFrame, horizon: int) -> np.ndarray:
        X = self.designs_[horizon].transform(rows, horizon)
        return np.exp(np.minimum(X @ self.fits_[horizon].params, MAX_ETA))

    def _predict_horizon(self, rows: pd.DataFrame, horizon: int) -> pd.DataFrame:
        mu = self.predict_mean(rows, horizon)
        alpha = self.alpha_[horizon]
        q = nbinom_quantiles(mu, alpha, self.quantiles)
        return forecast_frame(rows, horizon, mu, q, nbinom_p_positive(mu, alpha), self.quantiles)

    def fitted_state(self) -> dict[str, Any]:
        return {str(h): {
            "alpha": self.alpha_[h], "converged": f.converged, "method": f.method, "deviance": f.deviance,
            "n_rows": int(f.fitted.size), "rows_available": self.rows_available_[h], "start": self.starts_[h],
            "newton_iterations": f.iterations,
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
