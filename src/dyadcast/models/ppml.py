"""PPML gravity model per horizon (dense Newton or pyfixest `fepois`), with an NB2 predictive distribution.

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

Two engines for the same estimator (the tests check they agree to 1e-8 on carData Migration and on the
demo): with few fixed-effect levels (`engine="auto"` and rows x columns <= `dense_max_cells`) the effects
are dummy columns and the Poisson likelihood is maximised by damped Newton (`fit_ppml_dense`); beyond that,
pyfixest's demeaning (`fit_ppml`), which scales to tens of thousands of levels. On the demo (12.6k rows,
12 origins, 30 destinations) pyfixest took ~2 s CPU per horizon, the dense path ~0.2 s cold and two Newton
steps in "refresh" mode (`tune=False, params=<previous fitted_state()>`, which stores the fixed effects).
A dense failure falls back to pyfixest with a `ModelFallbackWarning`.

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
from dyadcast.models.base import CountModel, forecast_frame, target_column
from dyadcast.models.design import (
    Design,
    active_dyads,
    horizon_rows,
    in_dyads,
    present_columns,
    subsample,
    target_calendar_month,
)
from dyadcast.models.mle import FitFailed, ModelFallbackWarning
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
    engine: str = "pyfixest"
    iterations: int = 0


def fit_ppml(data: pd.DataFrame, y: str, regressors: Sequence[str], fixed_effects: Sequence[str],
             vcov: str | dict[str, str] = "hetero", fixef_tol: float = 1e-8) -> PPMLFit:
    """fepois with explicit vcov and response-scale fitted values; regressor names must be formula-safe.

    Why a helper: the Fally (2015) check in the tests and the forecasting model run the same code.
    """
    import pyfixest as pf

    rhs = " + ".join(regressors) if regressors else "1"
    fml = f"{y} ~ {rhs} | {' + '.join(fixed_effects)}"
    frame = data[list(dict.fromkeys([y, *regressors, *fixed_effects, *_cluster_columns(vcov)]))].copy()
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


def fit_ppml_dense(data: pd.DataFrame, y: str, regressors: Sequence[str], fixed_effects: Sequence[str],
                   vcov: str | dict[str, str] = "hetero", start: PPMLFit | None = None) -> PPMLFit:
    """The same estimator as `fit_ppml` with the fixed effects as dummy columns, by damped Newton.

    Why: with few fixed-effect levels (the demo: 12 origins, 30 destinations, 12 months) pyfixest's
    alternating-projection demeaning took ~2 s CPU per horizon, a dense Newton step on ~70 columns a few
    milliseconds, and `start` (last month's fit) makes it converge in 2-3 steps. Levels whose targets are
    all zero are dropped first (separation: their effect is minus infinity), as pyfixest does, and get the
    lowest effect of their kind. vcov: "hetero" (HC1, factor n / (n - k)) or {"CRV1": column} (factor
    G / (G - 1) (n - 1) / (n - k), k without the dummies of effects nested in the clusters): pyfixest's
    conventions, and the tests check both against pyfixest. They are recorded, not forecast with.
    """
    from dyadcast.models import mle

    frame = data[list(dict.fromkeys([y, *regressors, *fixed_effects, *_cluster_columns(vcov)]))].copy()
    for fe in fixed_effects:
        frame[fe] = frame[fe].astype(str)
    all_levels = {fe: set(frame[fe].unique()) for fe in fixed_effects}
    frame = _drop_separated(frame, y, fixed_effects)
    if frame.empty:
        raise mle.FitFailed(f"fit_ppml_dense: every {y} is zero; nothing to estimate")
    design = Design(numeric=list(regressors), categorical=list(fixed_effects), intercept=True)
    X = design.fit_transform(frame)
    target = frame[y].to_numpy(dtype=float)
    first = _dense_start(design.names_, fixed_effects, start) if start is not None else None
    res = mle.maximize(mle.Poisson(target), [X], first if first is not None else mle.log_link_start(target, X),
                       "PPML", keep_scores=True)
    named = dict(zip(design.names_, res.params, strict=True))
    coef = {r: float(named[r]) for r in regressors if r in named}
    se_all = _sandwich_se(res, frame, vcov, _nested_columns(design.names_, frame, fixed_effects, vcov))
    se = {r: float(se_all[design.names_.index(r)]) for r in coef}
    fixef = {}
    for j, fe in enumerate(fixed_effects):
        levels = design._levels[fe]
        base = float(named["const"]) if j == 0 else 0.0
        table = {str(lv): base + float(named.get(f"{fe}[{lv}]", 0.0)) for lv in levels}
        lowest = min(table.values())
        for level in all_levels[fe] - set(table):  # dropped for separation (all targets zero)
            table[level] = lowest
        fixef[fe] = table
    fitted = np.exp(np.minimum(X @ res.params, 30.0))
    return PPMLFit(coef=coef, se=se, fixef=fixef, fitted=fitted, y=target,
                   dropped=[r for r in regressors if r not in coef], n_obs=int(target.size), engine="dense-newton",
                   iterations=res.iterations)


def _drop_separated(frame: pd.DataFrame, y: str, fixed_effects: Sequence[str]) -> pd.DataFrame:
    """Remove rows of fixed-effect levels whose targets are all zero, until none is left."""
    while True:
        keep = np.ones(len(frame), dtype=bool)
        for fe in fixed_effects:
            totals = frame.groupby(fe, observed=True)[y].transform("sum").to_numpy()
            keep &= totals > 0
        if keep.all():
            return frame
        frame = frame[keep]


def _dense_start(names: Sequence[str], fixed_effects: Sequence[str], start: PPMLFit) -> np.ndarray | None:
    """Dummy-coded start values from a previous fit's coefficients and fixed-effect tables (any normalisation)."""
    values = np.zeros(len(names))
    ref = {}
    for fe in fixed_effects:
        table = start.fixef.get(fe)
        if not table:
            return None
        ref[fe] = table.get(sorted(table)[0], 0.0)
    for i, name in enumerate(names):
        if name == "const":
            values[i] = sum(ref.values())
        elif name in start.coef:
            values[i] = start.coef[name]
        elif "[" in name and name.endswith("]"):
            fe, level = name[:-1].split("[", 1)
            if fe in ref:
                values[i] = start.fixef[fe].get(level, ref[fe]) - ref[fe]
    return values


def _nested_columns(names: Sequence[str], frame: pd.DataFrame, fixed_effects: Sequence[str],
                    vcov: str | dict[str, str]) -> int:
    """Dummy columns of fixed effects nested in the clusters: left out of k in the small-sample factor.

    That is fixest's (and pyfixest's) convention; with it our CRV1 errors equal pyfixest's (see the tests).
    """
    if not (isinstance(vcov, dict) and "CRV1" in vcov):
        return 0
    cluster = vcov["CRV1"]
    nested = [fe for fe in fixed_effects if frame.groupby(fe, observed=True)[cluster].nunique().max() == 1]
    return sum(1 for n in names if any(n.startswith(f"{fe}[") for fe in nested))


def _sandwich_se(res, frame: pd.DataFrame, vcov: str | dict[str, str], nested: int = 0) -> np.ndarray:  # noqa: ANN001
    n, k = res.row_scores.shape
    k_ssc = k - nested
    bread = np.linalg.inv(res.neg_hessian)
    if isinstance(vcov, dict) and "CRV1" in vcov:
        groups = pd.factorize(frame[vcov["CRV1"]].astype(str))[0]
        sums = np.zeros((groups.max() + 1, k))
        np.add.at(sums, groups, res.row_scores)
        g = sums.shape[0]
        factor = g / max(g - 1, 1) * (n - 1) / max(n - k_ssc, 1)
        meat = sums.T @ sums
    elif vcov == "hetero":
        factor = n / max(n - k, 1)
        meat = res.row_scores.T @ res.row_scores
    else:
        return res.bse
    return np.sqrt(np.clip(np.diag(bread @ meat @ bread) * factor, 0.0, None))


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
                 max_rows: int | None = 2_000_000, fixef_tol: float = 1e-8, engine: str = "auto",
                 dense_max_cells: int = 20_000_000, tune: bool = True, params: dict[str, Any] | None = None) -> None:
        super().__init__(horizon=horizon, quantiles=quantiles, seed=seed)
        if engine not in ("auto", "dense", "pyfixest"):
            raise ValueError(f"PPMLGravity: engine={engine!r}; use 'auto', 'dense' or 'pyfixest'")
        self.max_rows = max_rows
        self.fixef_tol = fixef_tol
        # "auto": dummy columns and Newton while rows x columns <= dense_max_cells (20M: ~0.2 s per Newton
        # step), pyfixest's demeaning beyond (many fixed-effect levels, millions of rows)
        self.engine, self.dense_max_cells = engine, dense_max_cells
        self.tune, self.params = tune, params

    def _use_dense(self, rows: pd.DataFrame, n_regressors: int) -> bool:
        if self.engine != "auto":
            return self.engine == "dense"
        columns = n_regressors + rows["origin"].nunique() + rows["destination"].nunique() + 12
        return len(rows) * columns <= self.dense_max_cells

    def _stored_fit(self, h: int, design: Design) -> PPMLFit | None:
        """Last month's coefficients and fixed effects for horizon h, renamed to the x0.. stand-ins."""
        state = {} if self.tune or not self.params else (self.params.get(str(h)) or {})
        if not state.get("fixed_effects"):
            return None
        coef = {f"x{i}": float(state["coefficients"][n]) for i, n in enumerate(design.names_)
                if n in state.get("coefficients", {})}
        return PPMLFit(coef=coef, se={}, fixef=state["fixed_effects"], fitted=np.zeros(0), y=np.zeros(0))

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
        self.starts_: dict[int, str] = {}
        self.rows_available_: dict[int, int] = {}
        notes = []
        for h in range(1, self.horizon + 1):
            available = horizon_rows(active, h)
            rows = subsample(available, self.max_rows, self.seed + h)
            self.rows_available_[h] = len(available)
            design = Design(log1p=REGRESSORS_LOG1P, numeric=present_columns(rows, REGRESSORS_LEVEL),
                            intercept=False).fit(rows, h)
            X, fe = self._frame(rows, h, design)
            dyad = (rows["origin"].astype(str) + ">" + rows["destination"].astype(str)).to_numpy()
            data = X.assign(y=rows[target_column(h)].to_numpy(dtype=float), **fe, dyad=dyad)
            stored = self._stored_fit(h, design)
            fit = None
            if self._use_dense(rows, X.shape[1]):
                try:
                    fit = fit_ppml_dense(data, "y", list(X.columns), list(fe), vcov={"CRV1": "dyad"}, start=stored)
                except FitFailed as exc:
                    notes.append(f"{self.name} horizon {h}: dense Newton failed ({exc}); fell back to pyfixest")
            if fit is None:
                fit = fit_ppml(data, "y", list(X.columns), list(fe), vcov={"CRV1": "dyad"},
                               fixef_tol=self.fixef_tol)
            self.designs_[h], self.fits_[h] = design, fit
            self.starts_[h] = "previous fit" if stored is not None and fit.engine == "dense-newton" else "cold"
            previous = {} if self.tune else (self.params or {}).get(str(h)) or {}
            self.alpha_[h] = fit_nb_alpha(fit.y, fit.fitted, start=previous.get("alpha"))
        if notes:
            warnings.warn(" | ".join(notes), ModelFallbackWarning, stacklevel=3)

    def predict_mean(self, rows: pd.DataFrame, horizon: int) -> np.ndarray:
        X, fe = self._frame(rows, horizon, self.designs_[horizon])
        return np.exp(np.minimum(ppml_linear_predictor(self.fits_[horizon], X, fe), MAX_ETA))

    def _predict_horizon(self, rows: pd.DataFrame, horizon: int) -> pd.DataFrame:
        mu = self.predict_mean(rows, horizon)
        alpha = self.alpha_[horizon]
        q = nbinom_quantiles(mu, alpha, self.quantiles)
        return forecast_frame(rows, horizon, mu, q, nbinom_p_positive(mu, alpha), self.quantiles)

    def _named(self, h: int, values: dict[str, float]) -> dict[str, float]:
        names = self.designs_[h].names_
        return {names[int(k[1:])]: v for k, v in values.items()}

    def fitted_state(self) -> dict[str, Any]:
        return {str(h): {
            "alpha": self.alpha_[h], "n_obs": f.n_obs, "rows_available": self.rows_available_[h],
            "engine": f.engine, "start": self.starts_[h],
            "newton_iterations": f.iterations, "coefficients": self._named(h, f.coef),
            "std_errors_crv1_dyad": self._named(h, f.se),
            "dropped_collinear": [self.designs_[h].names_[int(k[1:])] for k in f.dropped],
            "n_fixed_effects": {k: len(v) for k, v in f.fixef.items()},
            "fixed_effects": {k: {lvl: round(v, 10) for lvl, v in t.items()} for k, t in f.fixef.items()},
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
