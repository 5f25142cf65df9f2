"""A weighted ensemble of member models: quantile averaging (Vincentization) with weights per horizon.

Combination: at every quantile level the ensemble quantile is the weighted mean of the members'
quantiles (Vincentization; Genest 1992, "Vincentization revisited", Ann. Stat.; recommended for
probabilistic forecast ensembles by Lichtendahl, Grushka-Cockayne & Winkler 2013). It keeps the typical
shape of the members' distributions instead of the multi-modal mixture a linear pool gives. The mean and
P(>0) are the weighted means of the members' (for P(>0) that is the linear pool's value, a documented
approximation for the Vincentized distribution).

Weights, per horizon, proportional to 1 / WIS (Bracher, Ray, Gneiting & Reich 2021):
* explicit `weights` (one dict for all horizons or one per horizon) are used as given;
* else `set_weights_from_accuracy(summary)` with the accuracy log's mean WIS per model and horizon;
* else, in "refresh" mode (`tune=False, params=<previous fitted_state()>`), last month's weights when they
  cover every member and horizon: like a GBM's rounds, they are this model's hyper-parameters, validated out
  of sample when they were set (recorded as weight source "previous fit", with that pseudo-cutoff);
* else `fit` holds out a pseudo-cutoff: the last anchor month C' whose target_H is known. Members are fitted
  on anchors <= C' with every target after C' hidden, forecast from C', and are scored against the known
  targets. Then the members are refitted on the whole frame, starting from the hyper-parameters (and, for
  the regressions, the coefficients) they found at C', so the GBM's power search runs once, not twice.
Members take `tune`/`params` like the cycle gives them: in refresh mode each member starts from its part of
the previous state (`params["members"]`). Members already fitted on the same frame in the same cycle can be
handed over with `use_fitted_members` and are not refitted.
Members missing from a forecast row get no weight there (the remaining weights are renormalised).
"""

from __future__ import annotations

import copy
from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np
import pandas as pd

from dyadcast.config import DEFAULT_QUANTILES
from dyadcast.models.base import (
    FORECAST_KEY_COLUMNS,
    CountModel,
    finalize_forecast,
    known_at,
    quantile_column,
    target_column,
)

Weights = Mapping[int, Mapping[str, float]]


def wis(y: np.ndarray, q: np.ndarray, levels: Sequence[float]) -> np.ndarray:
    """Weighted interval score per row from an (n, k) quantile matrix.

    Uses the identity WIS = 1/(K + 1/2) * sum over levels of the pinball loss (Bracher et al. 2021, eq. 3
    with w0 = 1/2, w_k = alpha_k / 2), exact when the levels are the median plus K symmetric pairs.
    """
    y = np.asarray(y, dtype=float)[:, None]
    tau = np.asarray(levels, dtype=float)[None, :]
    pinball = np.maximum(tau * (y - q), (tau - 1) * (y - q))
    return pinball.sum(axis=1) / ((len(levels) - 1) / 2 + 0.5)


def weights_from_scores(scores: Mapping[int, Mapping[str, float]]) -> dict[int, dict[str, float]]:
    """{horizon: {member: mean WIS}} -> {horizon: {member: weight}}, weights proportional to 1 / WIS."""
    out: dict[int, dict[str, float]] = {}
    for h, by_member in scores.items():
        inv = {m: 1.0 / max(float(s), 1e-12) for m, s in by_member.items() if np.isfinite(s)}
        total = sum(inv.values())
        if total > 0:
            out[int(h)] = {m: v / total for m, v in inv.items()}
    return out


def combine_forecasts(frames: Mapping[str, pd.DataFrame], weights: Weights | Mapping[str, float],
                      quantiles: Sequence[float]) -> pd.DataFrame:
    """Vincentize member forecast frames (standard forecast columns) with per-horizon member weights."""
    qcols = [quantile_column(q) for q in sorted(quantiles)]
    values = ["mean", *qcols, "p_positive"]
    parts = []
    for member, frame in frames.items():
        missing = [c for c in (*FORECAST_KEY_COLUMNS, *values) if c not in frame.columns]
        if missing:
            raise ValueError(f"ensemble: member {member!r} forecast lacks columns {missing}")
        part = frame[[*FORECAST_KEY_COLUMNS, *values]].copy()
        part["_w"] = [_weight(weights, int(h), member) for h in part["horizon"]]
        parts.append(part[part["_w"] > 0])
    stacked = pd.concat(parts, ignore_index=True)
    weighted = stacked[values].to_numpy(dtype=float) * stacked[["_w"]].to_numpy()
    sums = pd.DataFrame(weighted, columns=values).assign(_w=stacked["_w"].to_numpy())
    sums[list(FORECAST_KEY_COLUMNS)] = stacked[list(FORECAST_KEY_COLUMNS)]
    grouped = sums.groupby(list(FORECAST_KEY_COLUMNS), sort=True, as_index=False).sum()
    grouped[values] = grouped[values].to_numpy() / grouped[["_w"]].to_numpy()
    grouped = grouped.sort_values(["horizon", "origin", "destination", "target_month"], kind="stable")
    return finalize_forecast(grouped.drop(columns="_w"), quantiles)


def _weight(weights: Weights | Mapping[str, float], horizon: int, member: str) -> float:
    first = next(iter(weights.values()), None)
    if isinstance(first, Mapping):
        return float(weights.get(horizon, weights.get(str(horizon), {})).get(member, 0.0))
    return float(weights.get(member, 0.0))


class Ensemble(CountModel):
    name = "ensemble"
    quantile_method = "ensemble:vincentized (quantile averaging, weights by inverse WIS per horizon)"

    def __init__(self, horizon: int = 6, quantiles: Sequence[float] = DEFAULT_QUANTILES, seed: int = 0,
                 members: Sequence[str | CountModel] = ("poisson_glm", "tweedie_gbm"),
                 weights: Mapping[Any, Any] | None = None,
                 member_options: Mapping[str, Mapping[str, Any]] | None = None, tune: bool = True,
                 params: Mapping[str, Any] | None = None) -> None:
        super().__init__(horizon=horizon, quantiles=quantiles, seed=seed)
        # names only (JSON-friendly in get_params); instances given are kept as templates and copied per fit
        self._templates = {m.name: m for m in members if isinstance(m, CountModel)}
        self.members = tuple(m if isinstance(m, str) else m.name for m in members)
        self.weights = weights
        self.member_options = dict(member_options or {})
        # "refresh" (tune=False, params=<previous fitted_state()>): last month's weights and member states
        self.tune, self.params = tune, params
        self.accuracy_weights_: dict[int, dict[str, float]] = {}
        self._prefitted: dict[str, CountModel] = {}

    def _member_names(self) -> list[str]:
        return list(self.members)

    def use_fitted_members(self, fitted: Mapping[str, CountModel]) -> Ensemble:
        """Members already fitted on the same training frame (e.g. earlier in the same cycle): not refitted."""
        self._prefitted = {m: model for m, model in fitted.items() if m in self.members and model.is_fitted}
        return self

    def _new_members(self, states: Mapping[str, Any] | None = None) -> dict[str, CountModel]:
        """Fresh, unfitted members (instances given to the constructor are copied, never fitted in place).

        `states`: a fitted_state() per member, passed as `params` (with tune=False) to members that take it.
        """
        import inspect

        from dyadcast.models.registry import make_model, model_class

        out = {}
        for name in self.members:
            if name in self._templates:
                out[name] = copy.deepcopy(self._templates[name])
                continue
            options: dict[str, Any] = {}
            if {"tune", "params"} <= set(inspect.signature(model_class(name).__init__).parameters):
                state = (states or {}).get(name)
                options = {"tune": False, "params": state} if state else {"tune": self.tune}
            options.update(self.member_options.get(name, {}))
            out[name] = make_model(name, self.horizon, self.quantiles, self.seed, **options)
        return out

    def set_weights_from_accuracy(self, summary: pd.DataFrame) -> Ensemble:
        """Use past accuracy (columns model, horizon, mean_wis) for every horizon where all members were scored."""
        need = {"model", "horizon", "mean_wis"} - set(summary.columns)
        if need:
            raise ValueError(f"set_weights_from_accuracy: summary lacks columns {sorted(need)}")
        names = self._member_names()
        scores: dict[int, dict[str, float]] = {}
        for h, part in summary[summary["model"].isin(names)].groupby("horizon"):
            by_member = part.groupby("model")["mean_wis"].mean().to_dict()
            if set(by_member) == set(names) and all(np.isfinite(v) and v > 0 for v in by_member.values()):
                scores[int(h)] = by_member
        self.accuracy_weights_ = weights_from_scores(scores)
        if self.is_fitted:
            self.weights_.update(self.accuracy_weights_)
            self.weight_source_.update({h: "accuracy_log" for h in self.accuracy_weights_})
        return self

    def _fit(self, train: pd.DataFrame) -> None:
        names = self._member_names()
        equal = {m: 1.0 / len(names) for m in names}
        self.weights_ = {h: dict(equal) for h in range(1, self.horizon + 1)}
        self.weight_source_ = {h: "equal" for h in self.weights_}
        self.validation_wis_: dict[int, dict[str, float]] = {}
        previous = {} if self.tune or not self.params else dict(self.params)
        stored_states = previous.get("members") or {}
        carried = _stored_weights(previous, names, self.horizon)
        member_states: dict[str, Any] = dict(stored_states)
        if self.weights is not None:
            for h in self.weights_:
                w = {m: _weight(self.weights, h, m) for m in names}
                total = sum(w.values())
                if total <= 0:
                    raise ValueError(f"ensemble: weights {dict(self.weights)} give no member any weight at h={h}")
                self.weights_[h] = {m: v / total for m, v in w.items()}
                self.weight_source_[h] = "given"
        elif all(h in self.accuracy_weights_ for h in self.weights_):
            pass
        elif carried:  # refresh: last month's validated weights are this model's hyper-parameters
            self.weights_ = carried
            self.weight_source_ = {h: "previous fit" for h in self.weights_}
            self.pseudo_cutoff_ = previous.get("pseudo_cutoff")
        else:
            self.validation_wis_, validated = self._validate(train, stored_states)
            for h, w in weights_from_scores(self.validation_wis_).items():
                self.weights_[h], self.weight_source_[h] = w, "validation"
            # members tuned at the pseudo-cutoff hand their hyper-parameters (and start values) to the final fit
            member_states.update({m: model.fitted_state() for m, model in validated.items()})
        if self.weights is None:
            for h, w in self.accuracy_weights_.items():
                self.weights_[h], self.weight_source_[h] = dict(w), "accuracy_log"
        fresh = self._new_members(member_states)
        self.fitted_members_ = {m: self._prefitted.get(m) or model.fit(train) for m, model in fresh.items()}
        self.member_source_ = {m: "fitted earlier in the cycle" if m in self._prefitted else "fitted here"
                               for m in names}

    def _validate(self, train: pd.DataFrame, states: Mapping[str, Any] | None = None
                  ) -> tuple[dict[int, dict[str, float]], dict[str, CountModel]]:
        """Mean WIS per horizon and member at a pseudo-cutoff C' (targets after C' hidden while fitting),
        and the members fitted there."""
        last = target_column(self.horizon)
        known = train.loc[train[last].notna(), "month"] if last in train.columns else pd.Series(dtype=object)
        if known.empty:
            return {}, {}
        pseudo = pd.Timestamp(known.max())
        past = known_at(train, pseudo, self.horizon)
        anchor = train[pd.to_datetime(train["month"]) == pseudo]
        levels = sorted(self.quantiles)
        out: dict[int, dict[str, float]] = {}
        fitted = {}
        for member, model in self._new_members(states).items():
            forecast = model.fit(past).predict(past[pd.to_datetime(past["month"]) == pseudo])
            fitted[member] = model
            for h in range(1, self.horizon + 1):
                truth = anchor[["origin", "destination", target_column(h)]].rename(columns={target_column(h): "_y"})
                scored = forecast[forecast["horizon"] == h].merge(truth, on=["origin", "destination"])
                scored = scored[scored["_y"].notna()]
                if len(scored):
                    q = scored[[quantile_column(x) for x in levels]].to_numpy(dtype=float)
                    out.setdefault(h, {})[member] = float(wis(scored["_y"].to_numpy(), q, levels).mean())
        self.pseudo_cutoff_ = pseudo
        return {h: s for h, s in out.items() if len(s) == len(self.members)}, fitted

    def predict(self, rows: pd.DataFrame) -> pd.DataFrame:
        """Each member forecasts once; the frames are Vincentized with this horizon's weights."""
        if not self.is_fitted:
            return super().predict(rows)  # raises NotFittedError
        frames = {m: model.predict(rows) for m, model in self.fitted_members_.items()}
        return combine_forecasts(frames, self.weights_, self.quantiles)

    def _predict_horizon(self, rows: pd.DataFrame, horizon: int) -> pd.DataFrame:
        full = self.predict(rows)
        return full[full["horizon"] == horizon]

    def fitted_state(self) -> dict[str, Any]:
        if not self.is_fitted:
            return {}
        members = {m: model.fitted_state() for m, model in self.fitted_members_.items()}
        rhos = [st["origin_rho"] for st in members.values() if isinstance(st.get("origin_rho"), dict)]
        return {
            # for dyadcast.totals.aggregate_totals(rho=...): the members' per-horizon estimates, averaged
            "origin_rho": {h: float(np.mean([r[h] for r in rhos if h in r])) for h in rhos[0]} if rhos else None,
            "weights": {str(h): w for h, w in self.weights_.items()},
            "weight_source": {str(h): s for h, s in self.weight_source_.items()},
            "validation_wis": {str(h): s for h, s in self.validation_wis_.items()},
            "pseudo_cutoff": str(getattr(self, "pseudo_cutoff_", "") or "") or None,
            "member_source": getattr(self, "member_source_", {}),
            "members": members,
        }

    def save_artifacts(self, directory) -> list[str]:  # noqa: ANN001 - a pathlib.Path
        from pathlib import Path

        names = []
        for member, model in self.fitted_members_.items():
            names += [f"{member}/{n}" for n in model.save_artifacts(Path(directory) / member)]
        return names


def _stored_weights(state: Mapping[str, Any], names: Sequence[str], horizon: int) -> dict[int, dict[str, float]]:
    """Per-horizon weights from a previous fitted_state(), only when they cover every member and horizon."""
    weights = state.get("weights") or {}
    out = {}
    for h in range(1, horizon + 1):
        w = weights.get(str(h), weights.get(h))
        if not w or set(w) != set(names) or sum(w.values()) <= 0:
            return {}
        out[h] = {m: float(v) / sum(w.values()) for m, v in w.items()}
    return out
