"""Config names to model classes, imported lazily so a run pays only for the libraries it uses."""

from __future__ import annotations

import importlib
from collections.abc import Sequence
from typing import Any

from dyadcast.models.base import CountModel

MODELS: dict[str, str] = {
    "persistence": "dyadcast.models.baselines:Persistence",
    "seasonal_persistence": "dyadcast.models.baselines:SeasonalPersistence",
    "rolling_mean": "dyadcast.models.baselines:RollingMean",
    "poisson_glm": "dyadcast.models.poisson_glm:PoissonGLM",
    "ppml_gravity": "dyadcast.models.ppml:PPMLGravity",
    "negative_binomial": "dyadcast.models.count_regression:NegativeBinomialModel",
    "zinb": "dyadcast.models.count_regression:ZeroInflatedNB",
    "hurdle_nb": "dyadcast.models.count_regression:HurdleNB",
    "tweedie_gbm": "dyadcast.models.tweedie_gbm:TweedieGBM",
    "ensemble": "dyadcast.models.ensemble:Ensemble",
}


def model_class(name: str) -> type[CountModel]:
    try:
        target = MODELS[name]
    except KeyError:
        raise ValueError(f"unknown model {name!r}; choose from {sorted(MODELS)}") from None
    module_name, class_name = target.split(":")
    return getattr(importlib.import_module(module_name), class_name)


def make_model(name: str, horizon: int, quantiles: Sequence[float], seed: int = 0, **options: Any) -> CountModel:
    return model_class(name)(horizon=horizon, quantiles=quantiles, seed=seed, **options)
