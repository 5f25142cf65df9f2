"""Negative binomial, zero-inflated NB and hurdle NB regressions per horizon (statsmodels).

Features (compact, the same for all three): log1p of lag_1, roll_mean_3, roll_mean_12; log1p of
months_since_positive capped at 60 (never positive = 60); log_distance; contiguous; push_* and pull_*
indicators; sin/cos of the target's calendar month; missing indicators where training had NaN.
The zero part of ZINB and hurdle uses a smaller set (log1p of lag_1 and roll_mean_12, capped months
since positive, log_distance, sin/cos of the target month): whether a flow exists at all depends
mostly on its recent history, geography and season (without the season term the hurdle's P(> 0)
fell 0.054 short of the observed share in high-season months of the calibration test).

Fitting follows /work/shared/notes/models.md §4: every fit is checked (`mle_retvals['converged']`,
finite llf, no NaN standard errors); ZINB starts from ZIP + NB estimates with bfgs, maxiter=1000.
On failure the model falls back ZINB -> NB, hurdle -> NB, NB -> Poisson (with an NB alpha fitted by
1-D ML on the Poisson means), warns naming the model, horizon and reason, and records the fallback in
`fitted_state()`. Training frames above `max_rows` rows are subsampled uniformly (seeded) per
horizon (200k for NB, 50k for ZINB and hurdle NB): measured on 21k rows x 6 horizons, NB fits in
about 5 s but ZINB takes 100-150 s and hurdle NB about 60 s, and more rows barely change ~20
coefficients.

The hurdle model is a logit for P(Y > 0) plus a zero-truncated NB2 for the positives (R's `hurdle()`
default), not statsmodels' HurdleCountModel, whose zero part is a censored count model.
Quantiles come from each model's own distribution in closed form (`dyadcast.distributions`); the
tests check them against statsmodels' `get_distribution().ppf` and `predict(which="prob")`.
"""

from __future__ import annotations

import warnings
from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
from scipy.special import expit

from dyadcast.config import DEFAULT_QUANTILES
from dyadcast.distributions import (
    fit_nb_alpha,
    hurdle_nb_quantiles,
    nbinom_p_positive,
    nbinom_p_zero,
    nbinom_quantiles,
    zinb_p_positive,
    zinb_quantiles,
)
from dyadcast.models.base import CountModel, quantile_column, target_column, target_months
from dyadcast.models.design import Design, horizon_rows, present_columns, subsample
from dyadcast.models.poisson_glm import MAX_ETA

MSP_CAP = 60.0
COUNT_LOG1P = ("lag_1", "roll_mean_3", "roll_mean_12", "msp_capped")
COUNT_NUMERIC = ("log_distance", "contiguous", "push_*", "pull_*")
ZERO_LOG1P = ("lag_1", "roll_mean_12", "msp_capped")
ZERO_NUMERIC = ("log_distance",)
FALLBACK = {"zinb": "nb", "hurdle_nb": "nb", "nb": "poisson"}


class FitFailed(RuntimeError):
    """A statsmodels fit ran but its result is unusable (not converged, NaN llf or NaN SEs)."""


@dataclass
class CountFit:
    """Fitted parameters of one count regression, with its predictive distribution in closed form."""

    kind: str  # "poisson", "nb", "zinb" or "hurdle_nb"
    count_params: np.ndarray
    zero_params: np.ndarray | None = None  # ZINB: logit of a structural zero; hurdle: logit of Y > 0
    alpha: float = 0.0
    llf: float = float("nan")
    n_obs: int = 0
    bse: dict[str, list[float]] = field(default_factory=dict)

    def predict(self, X: np.ndarray, Z: np.ndarray | None, levels: Sequence[float]
                ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """(mean, quantiles (n, k), P(Y > 0))."""
        mu = np.exp(np.minimum(X @ self.count_params, MAX_ETA))
        if self.kind in ("poisson", "nb"):
            return mu, nbinom_quantiles(mu, self.alpha, levels), nbinom_p_positive(mu, self.alpha)
        g = expit(Z @ self.zero_params)
        if self.kind == "zinb":
            return (1 - g) * mu, zinb_quantiles(mu, self.alpha, g, levels), zinb_p_positive(mu, self.alpha, g)
        if self.kind == "hurdle_nb":
            positive_mean = mu / np.maximum(1.0 - nbinom_p_zero(mu, self.alpha), 1e-12)
            return g * positive_mean, hurdle_nb_quantiles(g, mu, self.alpha, levels), g
        raise ValueError(f"unknown count model kind {self.kind!r}")


def check_result(res: Any, label: str) -> None:
    """Raise FitFailed unless the optimiser converged with a finite llf and finite standard errors."""
    converged = bool(getattr(res, "mle_retvals", {}).get("converged", False))
    if not converged:
        raise FitFailed(f"{label}: optimiser did not converge")
    if not np.isfinite(res.llf):
        raise FitFailed(f"{label}: log-likelihood is {res.llf}")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        bse = np.asarray(res.bse, dtype=float)
    if np.isnan(bse).any():
        raise FitFailed(f"{label}: {int(np.isnan(bse).sum())} standard error(s) are NaN (singular Hessian)")


def fit_checked(model: Any, label: str, methods: Sequence[str] = ("newton", "bfgs"), **kwargs: Any) -> Any:
    """Try each optimiser in turn and return the first checked result.

    Why: Newton is fastest when it works, but on some frames it diverged to a NaN llf while
    reporting convergence; bfgs (maxiter 1000) then recovered the optimum.
    """
    errors = []
    for method in methods:
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                res = model.fit(method=method, maxiter=1000 if method != "newton" else 100, disp=0, **kwargs)
            check_result(res, f"{label} ({method})")
            return res
        except (FitFailed, np.linalg.LinAlgError, ValueError) as exc:
            errors.append(str(exc))
    raise FitFailed("; ".join(errors))


def fit_poisson(y: np.ndarray, X: np.ndarray) -> CountFit:
    """Poisson mean plus an NB alpha by 1-D ML (the last fallback; Poisson intervals alone are too narrow)."""
    from statsmodels.discrete.discrete_model import Poisson

    res = fit_checked(Poisson(y, X), "Poisson")
    mu = np.exp(np.minimum(X @ res.params, MAX_ETA))
    return CountFit("poisson", np.asarray(res.params), alpha=fit_nb_alpha(y, mu), llf=float(res.llf),
                    n_obs=len(y), bse={"count": list(map(float, res.bse))})


def _nb_result(y: np.ndarray, X: np.ndarray) -> Any:
    from statsmodels.discrete.discrete_model import NegativeBinomial

    return fit_checked(NegativeBinomial(y, X, loglike_method="nb2"), "NB")


def fit_nb(y: np.ndarray, X: np.ndarray) -> CountFit:
    """NB2 regression (Newton, then bfgs, from statsmodels' Poisson start)."""
    res = _nb_result(y, X)
    params = np.asarray(res.params)
    return CountFit("nb", params[:-1], alpha=float(params[-1]), llf=float(res.llf), n_obs=len(y),
                    bse={"count": list(map(float, res.bse))})


def fit_zinb(y: np.ndarray, X: np.ndarray, Z: np.ndarray) -> CountFit:
    """ZINB (NB2, logit inflation) from ZIP + NB starting values, bfgs with maxiter=1000 (models.md §4)."""
    from statsmodels.discrete.count_model import ZeroInflatedNegativeBinomialP, ZeroInflatedPoisson

    zip_res = fit_checked(ZeroInflatedPoisson(y, X, exog_infl=Z), "ZIP start", methods=("bfgs",))
    start = np.concatenate([np.asarray(zip_res.params)[: Z.shape[1]], np.asarray(_nb_result(y, X).params)])
    res = fit_checked(ZeroInflatedNegativeBinomialP(y, X, exog_infl=Z, p=2), "ZINB", methods=("bfgs",),
                      start_params=start)
    params = np.asarray(res.params)
    k_z = Z.shape[1]
    return CountFit("zinb", params[k_z:-1], zero_params=params[:k_z], alpha=float(params[-1]),
                    llf=float(res.llf), n_obs=len(y), bse={"all": list(map(float, res.bse))})


def fit_hurdle_nb(y: np.ndarray, X: np.ndarray, Z: np.ndarray) -> CountFit:
    """Logit for P(Y > 0) + zero-truncated NB2 for the positives; llf is the sum of both parts."""
    from statsmodels.discrete.discrete_model import Logit
    from statsmodels.discrete.truncated_model import TruncatedLFNegativeBinomialP

    positive = y > 0
    if positive.all() or not positive.any():
        raise FitFailed(f"hurdle: needs both zero and positive targets, "
                        f"got {int(positive.sum())} of {y.size} positive")
    zero_res = fit_checked(Logit(positive.astype(float), Z), "hurdle zero part (logit)")
    start = np.asarray(_nb_result(y[positive], X[positive]).params)
    count_res = fit_checked(TruncatedLFNegativeBinomialP(y[positive], X[positive], truncation=0, p=2),
                            "hurdle count part (truncated NB)", methods=("bfgs",), start_params=start)
    params = np.asarray(count_res.params)
    return CountFit("hurdle_nb", params[:-1], zero_params=np.asarray(zero_res.params),
                    alpha=float(params[-1]), llf=float(zero_res.llf + count_res.llf), n_obs=len(y),
                    bse={"zero": list(map(float, zero_res.bse)), "count": list(map(float, count_res.bse))})


FITTERS = {"poisson": lambda y, X, Z: fit_poisson(y, X), "nb": lambda y, X, Z: fit_nb(y, X),
           "zinb": fit_zinb, "hurdle_nb": fit_hurdle_nb}


def with_derived(frame: pd.DataFrame) -> pd.DataFrame:
    """Add `msp_capped`: months since positive, never-positive counted as the cap."""
    msp = frame["months_since_positive"] if "months_since_positive" in frame.columns else np.nan
    return frame.assign(msp_capped=np.clip(pd.Series(msp, index=frame.index).fillna(MSP_CAP), 0, MSP_CAP))


class _CountRegression(CountModel):
    kind: str = "nb"

    def __init__(self, horizon: int = 6, quantiles: Sequence[float] = DEFAULT_QUANTILES, seed: int = 0,
                 max_rows: int | None = 200_000) -> None:
        super().__init__(horizon=horizon, quantiles=quantiles, seed=seed)
        self.max_rows = max_rows

    def _designs(self, rows: pd.DataFrame, h: int) -> tuple[Design, Design]:
        count = Design(log1p=COUNT_LOG1P, numeric=present_columns(rows, COUNT_NUMERIC), season="sincos")
        zero = Design(log1p=ZERO_LOG1P, numeric=present_columns(rows, ZERO_NUMERIC), season="sincos")
        return count.fit(rows, h), zero.fit(rows, h)

    def _fit(self, train: pd.DataFrame) -> None:
        self.designs_: dict[int, tuple[Design, Design]] = {}
        self.fits_: dict[int, CountFit] = {}
        self.fallbacks_: dict[int, list[str]] = {}
        for h in range(1, self.horizon + 1):
            rows = with_derived(subsample(horizon_rows(train, h), self.max_rows, self.seed + h))
            count, zero = self._designs(rows, h)
            X, Z = count.transform(rows, h), zero.transform(rows, h)
            y = rows[target_column(h)].to_numpy(dtype=float)
            kind, notes = self.kind, []
            while True:
                try:
                    fit = FITTERS[kind](y, X, Z)
                    break
                except (FitFailed, np.linalg.LinAlgError, ValueError) as exc:
                    if kind not in FALLBACK:
                        raise FitFailed(f"{self.name} horizon {h}: every fallback failed; "
                                        f"last: {exc}") from exc
                    note = f"{kind} failed ({exc}); fell back to {FALLBACK[kind]}"
                    warnings.warn(f"{self.name} horizon {h}: {note}", stacklevel=2)
                    notes.append(note)
                    kind = FALLBACK[kind]
            self.designs_[h], self.fits_[h], self.fallbacks_[h] = (count, zero), fit, notes

    def _predict_horizon(self, rows: pd.DataFrame, horizon: int) -> pd.DataFrame:
        rows = with_derived(rows)
        count, zero = self.designs_[horizon]
        X, Z = count.transform(rows, horizon), zero.transform(rows, horizon)
        mean, q, p_pos = self.fits_[horizon].predict(X, Z, self.quantiles)
        out = pd.DataFrame({
            "origin": rows["origin"].to_numpy(), "destination": rows["destination"].to_numpy(),
            "horizon": horizon, "target_month": target_months(rows, horizon).to_numpy(), "mean": mean,
        })
        for j, level in enumerate(self.quantiles):
            out[quantile_column(level)] = q[:, j]
        out["p_positive"] = p_pos
        return out

    def fitted_state(self) -> dict[str, Any]:
        state = {}
        for h, f in self.fits_.items():
            count, zero = self.designs_[h]
            state[str(h)] = {
                "family": f.kind, "fallbacks": self.fallbacks_[h], "converged": True, "alpha": f.alpha,
                "llf": f.llf, "n_obs": f.n_obs,
                "count_coefficients": dict(zip(count.names_, map(float, f.count_params), strict=True)),
                "zero_coefficients": (dict(zip(zero.names_, map(float, f.zero_params), strict=True))
                                      if f.zero_params is not None else None),
            }
        return state

    def save_artifacts(self, directory) -> list[str]:  # noqa: ANN001 - a pathlib.Path
        directory = Path(directory)
        directory.mkdir(parents=True, exist_ok=True)
        records = []
        for h, f in self.fits_.items():
            count, zero = self.designs_[h]
            records += [{"horizon": h, "family": f.kind, "part": "count", "term": n, "estimate": float(v)}
                        for n, v in zip(count.names_, f.count_params, strict=True)]
            if f.zero_params is not None:
                records += [{"horizon": h, "family": f.kind, "part": "zero", "term": n, "estimate": float(v)}
                            for n, v in zip(zero.names_, f.zero_params, strict=True)]
            records.append({"horizon": h, "family": f.kind, "part": "dispersion", "term": "nb_alpha",
                            "estimate": f.alpha})
        pd.DataFrame.from_records(records).to_csv(directory / "coefficients.csv", index=False)
        return ["coefficients.csv"]



class NegativeBinomialModel(_CountRegression):
    name = "negative_binomial"
    kind = "nb"
    quantile_method = "parametric:nb2 (model's own distribution)"


class ZeroInflatedNB(_CountRegression):
    """ZINB; `max_rows` defaults lower because statsmodels' bfgs costs ~1 ms per row per horizon here."""

    name = "zinb"
    kind = "zinb"
    quantile_method = "parametric:zinb (model's own distribution)"

    def __init__(self, horizon: int = 6, quantiles: Sequence[float] = DEFAULT_QUANTILES, seed: int = 0,
                 max_rows: int | None = 50_000) -> None:
        super().__init__(horizon=horizon, quantiles=quantiles, seed=seed, max_rows=max_rows)


class HurdleNB(_CountRegression):
    """Hurdle NB; `max_rows` defaults lower for the same reason (the truncated NB uses numerical scores)."""

    name = "hurdle_nb"
    kind = "hurdle_nb"
    quantile_method = "parametric:hurdle-nb (logit + zero-truncated NB2)"

    def __init__(self, horizon: int = 6, quantiles: Sequence[float] = DEFAULT_QUANTILES, seed: int = 0,
                 max_rows: int | None = 50_000) -> None:
        super().__init__(horizon=horizon, quantiles=quantiles, seed=seed, max_rows=max_rows)
