"""Negative binomial, zero-inflated NB and hurdle NB regressions per horizon.

Features (compact, the same for all three): log1p of lag_1, roll_mean_3, roll_mean_12; log1p of
months_since_positive capped at 60 (never positive = 60); log_distance; contiguous; push_* and pull_*
indicators; sin/cos of the target's calendar month; missing indicators where training had NaN.
The zero part of ZINB and hurdle uses a smaller set (log1p of lag_1 and roll_mean_12, capped months
since positive, log_distance, sin/cos of the target month): whether a flow exists at all depends
mostly on its recent history, geography and season (without the season term the hurdle's P(> 0)
fell 0.054 short of the observed share in high-season months of the calibration test).

Fitting: maximum likelihood by damped Newton with analytic derivatives (`dyadcast.models.mle`; the tests
check the optima against statsmodels and the published NMES1988 fits). The slopes of the logit zero parts
(ZINB inflation, hurdle) carry a weak N(0, 10^2) prior (`mle.ZERO_PART_RIDGE`) so that zeros separated by a
covariate (never-positive dyads) give a unique finite estimate instead of a ridge the optimiser wanders on.
Every fit is checked (converged, finite llf, finite standard errors). Starts: "fit" mode (`tune=True`, or no stored state) starts NB from a
Poisson fit, ZINB from NB plus a constant inflation, the hurdle's count part from NB on the positives;
"refresh" mode (`tune=False, params=<previous fitted_state()>`) starts every part from last month's
coefficients, matched by name, which usually converges in 2-4 Newton steps. The optimum is the same
either way (to the convergence tolerance) when the likelihood has one mode, as on the active dyads the cycle
fits; a ZINB likelihood can have two (inflation explaining the zeros vs. dispersion doing so, seen with
never-positive dyads in the frame), and then a refresh stays at last month's mode. `fitted_state()` records
the start, the iterations and the llf.

On failure the model falls back ZINB -> NB, hurdle -> NB, NB -> Poisson (with an NB alpha fitted by
1-D ML on the Poisson means), records the fallback in `fitted_state()` and raises one
`ModelFallbackWarning` per fit listing every horizon that fell back and why. Training frames above
`max_rows` rows per horizon are subsampled uniformly (seeded); the row count used and the rows available
are recorded (`n_obs`, `rows_available`). The demo's 12.6k rows per horizon are never subsampled.

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
from scipy.special import expit, logit

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
from dyadcast.models import mle
from dyadcast.models.base import CountModel, forecast_frame, target_column
from dyadcast.models.design import Design, horizon_rows, present_columns, subsample
from dyadcast.models.mle import FitFailed, ModelFallbackWarning
from dyadcast.models.poisson_glm import MAX_ETA

__all__ = ["FitFailed", "ModelFallbackWarning", "CountFit", "fit_poisson", "fit_nb", "fit_zinb", "fit_hurdle_nb"]

MSP_CAP = 60.0
COUNT_LOG1P = ("lag_1", "roll_mean_3", "roll_mean_12", "msp_capped")
COUNT_NUMERIC = ("log_distance", "contiguous", "push_*", "pull_*")
ZERO_LOG1P = ("lag_1", "roll_mean_12", "msp_capped")
ZERO_NUMERIC = ("log_distance",)
FALLBACK = {"zinb": "nb", "hurdle_nb": "nb", "nb": "poisson"}
LOG_ALPHA_START = (np.log(1e-3), np.log(50.0))  # clip for moment starts; the fit itself is unbounded


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
    iterations: int = 0

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


@dataclass
class Start:
    """Start values for a fit (any part may be missing); from a previous fit in "refresh" mode."""

    count: np.ndarray | None = None
    zero: np.ndarray | None = None
    alpha: float | None = None

    def has_count(self, k: int) -> bool:
        """Count coefficients for a k-column design and a dispersion: enough to start NB-type parts."""
        return self.count is not None and self.count.size == k and bool(self.alpha)

    def has_zero(self, k: int) -> bool:
        return self.zero is not None and self.zero.size == k


def _check_targets(y: np.ndarray, label: str) -> None:
    if np.any(~np.isfinite(y)) or np.any(y < 0):
        raise ValueError(f"{label}: targets must be finite and >= 0; drop rows with a NaN target first")
    if not np.any(y > 0):
        raise FitFailed(f"{label}: all {y.size} targets are zero; no count model can be estimated")


def _moment_log_alpha(y: np.ndarray, mu: np.ndarray) -> float:
    """log of sum((y - mu)^2 - y) / sum(mu^2), clipped: a cheap start for the NB dispersion."""
    alpha = float(np.sum((y - mu) ** 2 - y) / max(float(np.sum(mu**2)), 1e-12))
    return float(np.clip(np.log(max(alpha, 1e-12)), *LOG_ALPHA_START))


def _poisson_params(y: np.ndarray, X: np.ndarray, start: np.ndarray | None, label: str) -> mle.MLEResult:
    first = start if start is not None and start.size == X.shape[1] else mle.log_link_start(y, X)
    return mle.maximize(mle.Poisson(y), [X], first, label)


def fit_poisson(y: np.ndarray, X: np.ndarray, start: Start | None = None) -> CountFit:
    """Poisson mean plus an NB alpha by 1-D ML (the last fallback; Poisson intervals alone are too narrow)."""
    _check_targets(y, "Poisson")
    res = _poisson_params(y, X, start.count if start else None, "Poisson")
    mu = np.exp(np.minimum(X @ res.params, MAX_ETA))
    return CountFit("poisson", res.params, alpha=fit_nb_alpha(y, mu), llf=res.llf, n_obs=len(y),
                    bse={"count": res.bse.tolist()}, iterations=res.iterations)


def _nb(y: np.ndarray, X: np.ndarray, start: Start | None, label: str) -> tuple[mle.MLEResult, int]:
    """NB2 by Newton on (beta, log alpha); cold starts come from a Poisson fit and a moment alpha."""
    iterations = 0
    if start is not None and start.has_count(X.shape[1]):
        beta, tau = start.count, np.log(start.alpha)
    else:
        pois = _poisson_params(y, X, start.count if start else None, f"{label} Poisson start")
        iterations += pois.iterations
        beta = pois.params
        tau = _moment_log_alpha(y, np.exp(np.minimum(X @ beta, MAX_ETA)))
    res = mle.maximize(mle.NB2(y), [X, np.ones((y.size, 1))], np.r_[beta, tau], label)
    return res, iterations + res.iterations


def fit_nb(y: np.ndarray, X: np.ndarray, start: Start | None = None) -> CountFit:
    """NB2 regression; alpha is estimated jointly (on the log scale)."""
    _check_targets(y, "NB")
    res, iterations = _nb(y, X, start, "NB")
    return CountFit("nb", res.params[:-1], alpha=float(np.exp(res.params[-1])), llf=res.llf, n_obs=len(y),
                    bse={"count": res.bse[:-1].tolist(), "log_alpha": [float(res.bse[-1])]},
                    iterations=iterations)


def fit_zinb(y: np.ndarray, X: np.ndarray, Z: np.ndarray, start: Start | None = None) -> CountFit:
    """ZINB (NB2 count part, logit inflation); cold start: NB plus a constant share of structural zeros."""
    _check_targets(y, "ZINB")
    iterations = 0
    if start is not None and start.has_count(X.shape[1]):
        beta, tau = start.count, np.log(start.alpha)
    else:
        nb, iterations = _nb(y, X, start, "ZINB NB start")
        beta, tau = nb.params[:-1], nb.params[-1]
    if start is not None and start.has_zero(Z.shape[1]):
        gamma = start.zero
    else:
        mu = np.exp(np.minimum(X @ beta, MAX_ETA))
        p0_nb = float(np.mean(nbinom_p_zero(mu, np.exp(tau))))
        excess = (float(np.mean(y == 0)) - p0_nb) / max(1.0 - p0_nb, 1e-6)
        gamma = np.zeros(Z.shape[1])
        gamma[0] = logit(np.clip(excess, 0.02, 0.9))
    ridge = np.r_[mle.slope_ridge(Z.shape[1]), np.zeros(X.shape[1] + 1)]  # see mle.ZERO_PART_RIDGE
    res = mle.maximize(mle.ZINB(y), [Z, X, np.ones((y.size, 1))], np.r_[gamma, beta, tau], "ZINB", ridge=ridge)
    k_z = Z.shape[1]
    return CountFit("zinb", res.params[k_z:-1], zero_params=res.params[:k_z],
                    alpha=float(np.exp(res.params[-1])), llf=res.llf, n_obs=len(y),
                    bse={"zero": res.bse[:k_z].tolist(), "count": res.bse[k_z:-1].tolist(),
                         "log_alpha": [float(res.bse[-1])]}, iterations=iterations + res.iterations)


def fit_hurdle_nb(y: np.ndarray, X: np.ndarray, Z: np.ndarray, start: Start | None = None) -> CountFit:
    """Logit for P(Y > 0) + zero-truncated NB2 for the positives; llf is the sum of both parts."""
    positive = y > 0
    if positive.all() or not positive.any():
        raise FitFailed(f"hurdle: needs both zero and positive targets, "
                        f"got {int(positive.sum())} of {y.size} positive")
    share = float(positive.mean())
    if start is not None and start.has_zero(Z.shape[1]):
        gamma = start.zero
    else:
        gamma = np.zeros(Z.shape[1])
        gamma[0] = logit(share)
    zero_res = mle.maximize(mle.Logit(positive.astype(float)), [Z], gamma, "hurdle zero part (logit)",
                            ridge=mle.slope_ridge(Z.shape[1]))
    yp, Xp = y[positive], X[positive]
    iterations = zero_res.iterations
    if start is not None and start.has_count(X.shape[1]):
        first = np.r_[start.count, np.log(start.alpha)]
    else:
        nb, used = _nb(yp, Xp, start, "hurdle NB start (positives)")
        first, iterations = nb.params, iterations + used
    count_res = mle.maximize(mle.TruncatedNB2(yp), [Xp, np.ones((yp.size, 1))], first,
                             "hurdle count part (truncated NB)")
    return CountFit("hurdle_nb", count_res.params[:-1], zero_params=zero_res.params,
                    alpha=float(np.exp(count_res.params[-1])), llf=zero_res.llf + count_res.llf, n_obs=len(y),
                    bse={"zero": zero_res.bse.tolist(), "count": count_res.bse[:-1].tolist(),
                         "log_alpha": [float(count_res.bse[-1])]},
                    iterations=iterations + count_res.iterations)


FITTERS = {
    "poisson": lambda y, X, Z, **kw: fit_poisson(y, X, **kw),
    "nb": lambda y, X, Z, **kw: fit_nb(y, X, **kw),
    "zinb": fit_zinb,
    "hurdle_nb": fit_hurdle_nb,
}


def with_derived(frame: pd.DataFrame) -> pd.DataFrame:
    """Add `msp_capped`: months since positive, never-positive counted as the cap."""
    msp = frame["months_since_positive"] if "months_since_positive" in frame.columns else np.nan
    return frame.assign(msp_capped=np.clip(pd.Series(msp, index=frame.index).fillna(MSP_CAP), 0, MSP_CAP))


def stored_start(state: dict[str, Any] | None, count: Design, zero: Design) -> Start | None:
    """Start values from one horizon of a previous `fitted_state()`, matched by coefficient name."""
    if not state:
        return None
    beta, matched = mle.start_from(count.names_, state.get("count_coefficients"), np.zeros(len(count.names_)))
    out = Start(count=beta if matched else None, alpha=state.get("alpha") or None)
    if state.get("zero_coefficients"):
        gamma, z_matched = mle.start_from(zero.names_, state["zero_coefficients"], np.zeros(len(zero.names_)))
        out.zero = gamma if z_matched else None
    return out


class _CountRegression(CountModel):
    kind: str = "nb"

    def __init__(self, horizon: int = 6, quantiles: Sequence[float] = DEFAULT_QUANTILES, seed: int = 0,
                 max_rows: int | None = 200_000, tune: bool = True, params: dict[str, Any] | None = None) -> None:
        super().__init__(horizon=horizon, quantiles=quantiles, seed=seed)
        self.max_rows = max_rows
        self.tune, self.params = tune, params

    @staticmethod
    def _new_designs(rows: pd.DataFrame) -> tuple[Design, Design]:
        count = Design(log1p=COUNT_LOG1P, numeric=present_columns(rows, COUNT_NUMERIC), season="sincos")
        zero = Design(log1p=ZERO_LOG1P, numeric=present_columns(rows, ZERO_NUMERIC), season="sincos")
        return count, zero

    def _designs(self, rows: pd.DataFrame, h: int) -> tuple[Design, Design]:
        count, zero = self._new_designs(rows)
        return count.fit(rows, h), zero.fit(rows, h)

    def _fit(self, train: pd.DataFrame) -> None:
        self.designs_: dict[int, tuple[Design, Design]] = {}
        self.fits_: dict[int, CountFit] = {}
        self.fallbacks_: dict[int, list[str]] = {}
        self.starts_: dict[int, str] = {}
        self.rows_available_: dict[int, int] = {}
        stored = {} if self.tune or not self.params else self.params
        for h in range(1, self.horizon + 1):
            available = horizon_rows(train, h)
            rows = with_derived(subsample(available, self.max_rows, self.seed + h))
            count, zero = self._new_designs(rows)
            X, Z = count.fit_transform(rows, h), zero.fit_transform(rows, h)
            y = rows[target_column(h)].to_numpy(dtype=float)
            start = stored_start(stored.get(str(h)) or stored.get(h), count, zero)
            fit, notes = self._fit_with_fallbacks(y, X, Z, start, h)
            self.designs_[h], self.fits_[h], self.fallbacks_[h] = (count, zero), fit, notes
            self.starts_[h] = "previous fit" if start is not None else "cold"
            self.rows_available_[h] = len(available)
        fell = [f"{self.name} horizon {h}: " + "; ".join(n) for h, n in self.fallbacks_.items() if n]
        if fell:
            warnings.warn(" | ".join(fell), ModelFallbackWarning, stacklevel=3)

    def _fit_with_fallbacks(self, y: np.ndarray, X: np.ndarray, Z: np.ndarray, start: Start | None, h: int
                            ) -> tuple[CountFit, list[str]]:
        kind, notes = self.kind, []
        while True:
            try:
                fitter = FITTERS[kind]
                return (fitter(y, X, Z, start=start) if start is not None else fitter(y, X, Z)), notes
            except (FitFailed, np.linalg.LinAlgError, ValueError) as exc:
                if kind not in FALLBACK:
                    raise FitFailed(f"{self.name} horizon {h}: every fallback failed; last: {exc}; "
                                    "check the training frame for a constant or all-zero target") from exc
                notes.append(f"{kind} failed ({exc}); fell back to {FALLBACK[kind]}")
                kind = FALLBACK[kind]

    def _predict_horizon(self, rows: pd.DataFrame, horizon: int) -> pd.DataFrame:
        rows = with_derived(rows)
        count, zero = self.designs_[horizon]
        X, Z = count.transform(rows, horizon), zero.transform(rows, horizon)
        mean, q, p_pos = self.fits_[horizon].predict(X, Z, self.quantiles)
        return forecast_frame(rows, horizon, mean, q, p_pos, self.quantiles)

    def fitted_state(self) -> dict[str, Any]:
        state = {}
        for h, f in self.fits_.items():
            count, zero = self.designs_[h]
            state[str(h)] = {
                "family": f.kind, "fallbacks": self.fallbacks_[h], "converged": True, "alpha": f.alpha,
                "llf": f.llf, "n_obs": f.n_obs, "rows_available": self.rows_available_[h],
                "start": self.starts_[h], "newton_iterations": f.iterations,
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
    """ZINB; `max_rows` defaults lower than NB's: three linear predictors cost about 3x per Newton step."""

    name = "zinb"
    kind = "zinb"
    quantile_method = "parametric:zinb (model's own distribution)"

    def __init__(self, horizon: int = 6, quantiles: Sequence[float] = DEFAULT_QUANTILES, seed: int = 0,
                 max_rows: int | None = 100_000, tune: bool = True, params: dict[str, Any] | None = None) -> None:
        super().__init__(horizon=horizon, quantiles=quantiles, seed=seed, max_rows=max_rows, tune=tune,
                         params=params)


class HurdleNB(_CountRegression):
    """Hurdle NB; `max_rows` as for ZINB (two fits per horizon, the truncated NB evaluates NB twice per row)."""

    name = "hurdle_nb"
    kind = "hurdle_nb"
    quantile_method = "parametric:hurdle-nb (logit + zero-truncated NB2)"

    def __init__(self, horizon: int = 6, quantiles: Sequence[float] = DEFAULT_QUANTILES, seed: int = 0,
                 max_rows: int | None = 100_000, tune: bool = True, params: dict[str, Any] | None = None) -> None:
        super().__init__(horizon=horizon, quantiles=quantiles, seed=seed, max_rows=max_rows, tune=tune,
                         params=params)
