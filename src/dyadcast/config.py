"""Workspace configuration: one TOML file, read once per run, with defaults a new user can trust."""

from __future__ import annotations

import tomllib
from dataclasses import asdict, dataclass, field, fields
from pathlib import Path
from typing import Any

DEFAULT_QUANTILES: tuple[float, ...] = (0.05, 0.25, 0.5, 0.75, 0.95)
REQUIRED_QUANTILES: tuple[float, ...] = (0.05, 0.25, 0.5, 0.75, 0.95)  # scoring needs the 50 % and 90 % intervals


class ConfigError(ValueError):
    """A configuration value is wrong; the message names the key and what to change."""


@dataclass(frozen=True)
class ScheduleConfig:
    cron: str = "0 6 5 * *"
    timezone: str = "UTC"


@dataclass(frozen=True)
class SignalConfig:
    """Search over the lead (days) and smoothing window (days) of the daily organic signals."""

    lag_days_min: int = 0
    lag_days_max: int = 30
    window_days: tuple[int, ...] = (1, 3, 7, 14, 21, 30)


@dataclass(frozen=True)
class Config:
    horizon: int = 6
    quantiles: tuple[float, ...] = DEFAULT_QUANTILES
    models: tuple[str, ...] = ("persistence", "poisson_glm")
    primary_model: str = "poisson_glm"
    # "refresh": re-estimate with stored hyper-parameters each month; "fit": also re-tune.
    monthly_mode: str = "refresh"
    # Dyads with no positive flow for this many months are not fitted row by row.
    zero_lookback_months: int = 24
    training_window_months: int = 60
    seed: int = 20261201
    webhook_url: str = ""
    dask_address: str = ""
    snapshot_store: str = ""  # empty: DIR/snapshots; a local path (relative to DIR) or an fsspec URL otherwise
    accuracy_store: str = ""  # empty: DIR/accuracy; as snapshot_store
    schedule: ScheduleConfig = field(default_factory=ScheduleConfig)
    signals: SignalConfig = field(default_factory=SignalConfig)
    # Per-model constructor options, e.g. [model_options.zinb] max_rows = 20000
    model_options: dict[str, dict[str, Any]] = field(default_factory=dict)

    def to_dict(self) -> dict[str, Any]:
        return asdict(self)


def _coerce(section: type, values: dict[str, Any], where: str) -> Any:
    known = {f.name: f for f in fields(section)}
    unknown = sorted(set(values) - set(known))
    if unknown:
        raise ConfigError(f"{where}: unknown key(s) {unknown}; known keys are {sorted(known)}")
    out = {}
    for key, value in values.items():
        if isinstance(value, list):
            value = tuple(value)
        out[key] = value
    return section(**out)


def validate(config: Config) -> Config:
    if not 1 <= config.horizon <= 24:
        raise ConfigError(f"horizon = {config.horizon}: use a whole number of months from 1 to 24")
    levels = tuple(sorted(float(q) for q in config.quantiles))
    if any(not 0 < q < 1 for q in levels):
        raise ConfigError(f"quantiles = {list(config.quantiles)}: every level must lie strictly between 0 and 1")
    missing = [q for q in REQUIRED_QUANTILES if q not in levels]
    if missing:
        raise ConfigError(
            f"quantiles = {list(config.quantiles)}: add {missing}; the 50 % and 90 % intervals and the median "
            "are needed for scoring"
        )
    if config.monthly_mode not in ("refresh", "fit"):
        raise ConfigError(f"monthly_mode = {config.monthly_mode!r}: use 'refresh' or 'fit'")
    if not config.models:
        raise ConfigError("models = []: list at least one model; persistence is always added")
    from dyadcast.models.registry import MODELS

    unknown = sorted({*config.models, *config.model_options, config.primary_model} - set(MODELS))
    if unknown:
        raise ConfigError(f"unknown model name(s) {unknown}; available: {sorted(MODELS)}")
    _validate_stores(config)
    return config


def _validate_stores(config: Config) -> None:
    """Syntax only: a missing backend (s3fs, gcsfs, adlfs) is reported when the store is first used."""
    from dyadcast.stores import StoreError, check_store_text

    for key, value in (("snapshot", config.snapshot_store), ("accuracy", config.accuracy_store)):
        if not isinstance(value, str):
            raise ConfigError(f"[stores] {key} = {value!r}: give a quoted path or URL, or \"\" for the default")
        try:
            check_store_text(value)
        except StoreError as exc:
            raise ConfigError(f"[stores] {key} = {value!r}: {exc}") from exc


def load_config(path: Path) -> Config:
    """Read dyadcast.toml; unknown keys are errors so that a typo never silently falls back to a default."""
    try:
        raw = tomllib.loads(Path(path).read_text(encoding="utf-8"))
    except tomllib.TOMLDecodeError as exc:
        raise ConfigError(f"{path}: not valid TOML ({exc}); fix the line named and rerun") from exc
    schedule = _coerce(ScheduleConfig, raw.pop("schedule", {}), f"{path} [schedule]")
    signals = _coerce(SignalConfig, raw.pop("signals", {}), f"{path} [signals]")
    model_options = raw.pop("model_options", {})
    if not all(isinstance(v, dict) for v in model_options.values()):
        raise ConfigError(f"{path} [model_options]: use one table per model, e.g. [model_options.zinb]")
    forecast = raw.pop("forecast", {})
    stores = raw.pop("stores", {})
    notify = raw.pop("notify", {})
    flat = {**forecast, **{f"{k}_store": v for k, v in stores.items()}, **raw}
    if "webhook_url" in notify:
        flat["webhook_url"] = notify["webhook_url"]
    if "quantiles" in flat:
        flat["quantiles"] = tuple(float(q) for q in flat["quantiles"])
    base = _coerce(Config, {k: v for k, v in flat.items()}, str(path))
    return validate(
        Config(**{**{f.name: getattr(base, f.name) for f in fields(Config)}, "schedule": schedule,
                  "signals": signals, "model_options": model_options})
    )


DEFAULT_TOML = """\
# dyadcast workspace configuration. Every key is optional; the values shown are the defaults.

[forecast]
# Months ahead to forecast after the cutoff (h = 1 ... horizon).
horizon = 6
# Predictive quantile levels written for every forecast row. 0.05, 0.25, 0.5, 0.75 and 0.95 are required
# because the accuracy log scores the 50 % and 90 % central intervals.
quantiles = [0.05, 0.25, 0.5, 0.75, 0.95]
# Models run every month. The persistence baseline is always run as well, so skill against it is measurable.
# Available: persistence, seasonal_persistence, rolling_mean, poisson_glm, ppml_gravity,
#            negative_binomial, zinb, hurdle_nb, tweedie_gbm, ensemble
models = ["persistence", "poisson_glm"]
# The model whose forecast the report shows first.
primary_model = "poisson_glm"
# "refresh": re-estimate with the stored specification each month; "fit": also re-tune hyper-parameters.
monthly_mode = "refresh"
# Dyads with no positive flow in this many months get a cheap zero-inflated forecast instead of a fit.
zero_lookback_months = 24
# Months of history used to train (ending at the cutoff).
training_window_months = 60
seed = 20261201

[signals]
# Organic signals: the lead (days) and smoothing window (days) are chosen from the training data.
lag_days_min = 0
lag_days_max = 30
window_days = [1, 3, 7, 14, 21, 30]

[schedule]
# When `dyadcast schedule` runs the monthly cycle (cron syntax, IANA time zone).
cron = "0 6 5 * *"
timezone = "UTC"

[stores]
# Where snapshots and accuracy batches go. Empty: the workspace folders snapshots/ and accuracy/.
# Otherwise a local folder (relative to this workspace) or an fsspec URL such as s3://bucket/dyadcast/snapshots
# (install the backend, e.g. s3fs, and give credentials through its environment variables). The warehouse
# file always stays in this workspace.
snapshot = ""
accuracy = ""

[notify]
# Optional: a URL that receives a short JSON message when a run fails or rejects files.
webhook_url = ""

# Optional per-model settings passed to the model's constructor, one table per model, e.g.
# [model_options.tweedie_gbm]
# power_grid = [1.1, 1.3, 1.5]
"""
