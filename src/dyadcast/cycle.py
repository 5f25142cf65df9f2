"""One forecast cycle at a cutoff, as plain functions: features → fit → predict → totals → snapshot.

The Prefect flows in `flows/` call these in order (and the per-model step concurrently); tests call
them directly. Nothing here imports Prefect.
"""

from __future__ import annotations

import json
import time
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field, replace
from datetime import date
from pathlib import Path
from typing import Any

import duckdb
import pandas as pd

from dyadcast.config import Config
from dyadcast.features import FeatureSet, build_features
from dyadcast.models.base import CountModel
from dyadcast.models.registry import make_model
from dyadcast.months import add_months, format_month
from dyadcast.snapshots import ARTIFACTS_DIR, ARTIFACTS_KEY, SnapshotRef, new_run_id, write_snapshot
from dyadcast.stores import is_local

BASELINES = ("persistence", "seasonal_persistence", "rolling_mean")
REFERENCE_MODEL = "persistence"
Progress = Callable[[str], None]


class CycleError(RuntimeError):
    """A cycle cannot run with the data at hand; the message says what is missing."""


@dataclass
class PreparedData:
    cutoff: date
    as_of: date
    run_kind: str
    features: FeatureSet
    train: pd.DataFrame
    rows: pd.DataFrame
    active_train: pd.DataFrame
    active_rows: pd.DataFrame
    dormant_rows: pd.DataFrame
    dormant_forecast: pd.DataFrame
    timings: dict[str, float] = field(default_factory=dict)


@dataclass
class ModelForecast:
    model: str
    forecast: pd.DataFrame  # dyad rows and totals, with a `level` column
    metadata: dict[str, Any]
    fitted: CountModel


def models_to_run(config: Config, requested: Sequence[str] | None = None) -> list[str]:
    """Configured (or requested) models, with the persistence baseline always first."""
    names = list(requested or config.models)
    return [REFERENCE_MODEL, *[n for n in dict.fromkeys(names) if n != REFERENCE_MODEL]]


def newest_cutoff(con: duckdb.DuckDBPyConnection) -> date:
    """The newest month with published flows: the default cutoff of a scheduled run."""
    value = con.execute("SELECT max(month) FROM raw_flows").fetchall()[0][0]
    if value is None:
        raise CycleError("no flows have been loaded yet; drop a flows file into the inbox and run again")
    return value


def first_publication(con: duckdb.DuckDBPyConnection, cutoff: date) -> date:
    """When the cutoff month's arrivals were first published: the as-of date of an honest backtest."""
    value = con.execute("SELECT min(published_on) FROM raw_flows WHERE month = ?", [cutoff]).fetchall()[0][0]
    if value is None:
        raise CycleError(f"no flows were ever published for {format_month(cutoff)}; pick an earlier cutoff")
    return value


def prepare(
    con: duckdb.DuckDBPyConnection, config: Config, cutoff: date, as_of: date, run_kind: str = "monthly",
    progress: Progress = print,
) -> PreparedData:
    """Build the feature frame once for all models and split off the dormant dyads."""
    from dyadcast.models.dormant import DormantForecaster, split_dormant

    started = time.perf_counter()
    start = add_months(cutoff, -(config.training_window_months + config.horizon))
    features = build_features(con, cutoff, as_of, horizon=config.horizon, signal_config=config.signals, start=start)
    frame = features.frame
    month = pd.Timestamp(cutoff)
    rows = frame[frame["month"] == month].reset_index(drop=True)
    train = frame[frame["month"] < month].reset_index(drop=True)
    if rows.empty:
        raise CycleError(
            f"no data for cutoff {format_month(cutoff)} as of {as_of}: its flows were not published by then"
        )
    if train.empty:
        raise CycleError(f"no training history before {format_month(cutoff)}; load earlier months first")
    # the full frame is now held twice (train + rows are copies): keep only its schema, so the cycle's
    # peak memory is one frame rather than two (bench/README.md, memory of the cycle)
    features = replace(features, frame=frame.iloc[0:0].copy())  # a copy: a slice would keep the frame alive
    del frame
    built = time.perf_counter()
    active_train, active_rows, dormant_rows = split_dormant(train, rows, config.zero_lookback_months)
    dormant = DormantForecaster(config.horizon, config.quantiles, config.zero_lookback_months).fit(train)
    dormant_forecast = dormant.predict(dormant_rows) if len(dormant_rows) else pd.DataFrame()
    progress(
        f"  features for {format_month(cutoff)} as of {as_of}: {len(train) + len(rows):,} rows, {len(rows):,} dyads "
        f"({len(dormant_rows):,} dormant), {len(features.feature_names)} features"
    )
    return PreparedData(
        cutoff=cutoff, as_of=as_of, run_kind=run_kind, features=features, train=train, rows=rows,
        active_train=active_train, active_rows=active_rows, dormant_rows=dormant_rows,
        dormant_forecast=dormant_forecast,
        timings={"features_s": built - started, "dormant_s": time.perf_counter() - built},
    )


def fit_and_forecast(
    name: str, data: PreparedData, config: Config, options: dict[str, Any] | None = None,
    model: CountModel | None = None,
) -> ModelForecast:
    """Fit one model and forecast every dyad; dormant dyads share one cheap forecaster (baselines excepted)."""
    options = {**config.model_options.get(name, {}), **(options or {})}
    if model is None:
        model = make_model(name, horizon=config.horizon, quantiles=config.quantiles, seed=config.seed, **options)
    started = time.perf_counter()
    if name in BASELINES or data.dormant_forecast.empty:
        model.fit(data.train)
        fitted_at = time.perf_counter()
        dyads = model.predict(data.rows)
    else:
        model.fit(data.active_train)
        fitted_at = time.perf_counter()
        dyads = model.predict(data.active_rows) if len(data.active_rows) else data.dormant_forecast.iloc[0:0]
        dyads = pd.concat([dyads, data.dormant_forecast], ignore_index=True)
    predicted_at = time.perf_counter()
    dyads.insert(0, "level", "dyad")
    return _package(name, model, data, config, dyads, (started, fitted_at, predicted_at), options)


def _package(
    name: str, model: CountModel, data: PreparedData, config: Config, dyads: pd.DataFrame,
    clock: tuple[float, float, float], options: dict[str, Any] | None,
) -> ModelForecast:
    """Add coherent totals (origin dependence from the model when it estimated one) and the metadata."""
    from dyadcast.totals import aggregate_totals

    started, fitted_at, predicted_at = clock
    state = model.fitted_state()
    rho = state.get("origin_rho") if isinstance(state, dict) else None
    totals = aggregate_totals(dyads.drop(columns="level"), config.quantiles, seed=config.seed, rho=rho)
    forecast = pd.concat([dyads, totals], ignore_index=True)
    metadata = {
        "model": name,
        "run_kind": data.run_kind,
        "as_of": data.as_of.isoformat(),
        "horizon": config.horizon,
        "quantiles": list(config.quantiles),
        "quantile_method": getattr(model, "quantile_method", "unknown"),
        # the stored state a refresh started from is recorded as a flag, not copied again
        "params": {k: v for k, v in model.get_params().items() if k != "params"},
        "options": {k: v for k, v in (options or {}).items() if k != "params"},
        "refreshed_from_stored_state": bool(options and "params" in options),
        "fitted_state": state,
        "training_window": {
            "first_anchor_month": str(data.train["month"].min().date()),
            "last_anchor_month": str(data.train["month"].max().date()),
            "rows": int(len(data.train)),
            "active_rows": int(len(data.active_train)),
        },
        "dyads": {"total": int(len(data.rows)), "dormant": int(len(data.dormant_rows)),
                  "dormant_handled_by": "model" if name in BASELINES else "dormant_forecaster"},
        "features": data.features.feature_names,
        "feature_metadata": data.features.metadata,
        "data_vintage": {"as_of": data.as_of.isoformat()},
        "timings": {**data.timings, "fit_s": fitted_at - started, "predict_s": predicted_at - fitted_at,
                    "totals_s": time.perf_counter() - predicted_at},
        "totals_method": "joint draws with a Gaussian copula within origin (see dyadcast.totals)",
        "totals_origin_rho": rho if rho is not None else "default",
    }
    return ModelForecast(model=name, forecast=forecast, metadata=metadata, fitted=model)


def write_forecast(store: str, data: PreparedData, result: ModelForecast, run_id: str | None = None) -> SnapshotRef:
    return write_snapshot(
        store, data.cutoff, result.model, run_id or new_run_id(), result.forecast, result.metadata,
        write_artifacts=result.fitted.save_artifacts,
    )


def model_options(con: duckdb.DuckDBPyConnection, name: str, mode: str, cutoff: date) -> dict[str, Any]:
    """'refresh': reuse the hyper-parameters of the model's newest earlier snapshot; 'fit': re-tune them.

    Only models whose constructor takes `tune` and `params` have hyper-parameters to carry over.
    """
    import inspect

    from dyadcast.models.registry import model_class

    accepted = inspect.signature(model_class(name).__init__).parameters
    if not {"tune", "params"} <= set(accepted):
        return {}
    if mode == "fit":
        return {"tune": True}
    rows = con.execute(
        "SELECT path, metadata_json FROM snapshot_runs WHERE model = ? AND cutoff < ? "
        "ORDER BY cutoff DESC, created_at DESC LIMIT 1", [name, cutoff]
    ).fetchall()
    if not rows:
        return {"tune": True}
    path, metadata_json = rows[0]
    metadata = json.loads(metadata_json)
    state = metadata.get("fitted_state") or {}
    if not state:
        return {"tune": True}
    return {"tune": False, "params": {**state, **_stored_files(model_class(name), path, metadata)}}


def _stored_files(cls: type, path: str, metadata: dict[str, Any]) -> dict[str, str]:
    """The folder of the stored snapshot's model files, for a model that continues from them (tweedie_gbm
    continues last month's boosters). Local stores only: the model reads them as files; with an object store
    it refits with the stored state instead, and says so in its `refresh_note`."""
    if not getattr(cls, "continues_from_artifacts", False) or not metadata.get("artifacts") or not is_local(path):
        return {}
    folder = Path(str(path).removeprefix("file://")) / ARTIFACTS_DIR
    return {ARTIFACTS_KEY: str(folder)} if folder.is_dir() else {}


def accuracy_weights_source(con: duckdb.DuckDBPyConnection) -> pd.DataFrame:
    """Mean WIS per model and horizon from the accuracy log (first releases, dyad level), for ensemble weights."""
    return con.execute(
        "SELECT model, horizon, avg(mean_wis) AS mean_wis FROM accuracy_summary "
        "WHERE level = 'dyad' AND vintage = 'first_release' GROUP BY ALL"
    ).df()


def ensemble_forecast(
    data: PreparedData, config: Config, members: dict[str, ModelForecast], accuracy: pd.DataFrame,
    options: dict[str, Any] | None = None,
) -> ModelForecast:
    """Combine members already fitted this cycle when the accuracy log weighs all of them at every horizon.

    Without that history the ensemble picks its weights itself (last month's weights in refresh mode, else a
    validation split per horizon) and reuses the members fitted this cycle for the final forecast.
    """
    from dyadcast.models.ensemble import Ensemble, combine_forecasts

    ensemble = make_model("ensemble", horizon=config.horizon, quantiles=config.quantiles, seed=config.seed)
    assert isinstance(ensemble, Ensemble)
    available = [m for m in ensemble.members if m in members]
    if len(available) == len(ensemble.members) and not accuracy.empty:
        ensemble.set_weights_from_accuracy(accuracy)
        if all(h in ensemble.accuracy_weights_ for h in range(1, config.horizon + 1)):
            started = time.perf_counter()
            frames = {
                m: members[m].forecast.query("level == 'dyad'").drop(columns="level") for m in available
            }
            dyads = combine_forecasts(frames, ensemble.accuracy_weights_, config.quantiles)
            dyads.insert(0, "level", "dyad")
            ensemble.weights_ = ensemble.accuracy_weights_
            ensemble.weight_source_ = {h: "accuracy_log" for h in ensemble.weights_}
            ensemble.validation_wis_ = {}
            ensemble.fitted_members_ = {m: members[m].fitted for m in available}
            ensemble.fitted_ = True
            now = time.perf_counter()
            return _package("ensemble", ensemble, data, config, dyads, (started, started, now), None)
    options = {**config.model_options.get("ensemble", {}), **(options or {})}
    ensemble = make_model("ensemble", horizon=config.horizon, quantiles=config.quantiles, seed=config.seed,
                          **options)
    assert isinstance(ensemble, Ensemble)
    ensemble.use_fitted_members({m: r.fitted for m, r in members.items()})
    return fit_and_forecast("ensemble", data, config, options, model=ensemble)
