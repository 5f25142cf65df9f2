"""Gather everything one report shows, once, into a plain dataclass the renderers read."""

from __future__ import annotations

from dataclasses import dataclass, field
from datetime import UTC, date, datetime

import duckdb
import pandas as pd

from dyadcast.report import queries
from dyadcast.report.summary import REFERENCE

HISTORY_MONTHS = 18  # months of reported actuals drawn before each fan
TOP_SERIES = 3  # largest destinations and origins shown beside the world total


@dataclass
class Series:
    key: tuple[str, str, str]  # level, origin, destination
    label: str


@dataclass
class ReportData:
    cutoff: date | None
    requested_model: str
    model: str | None  # the model whose forecast is shown (the primary one when it ran)
    horizon: int
    forecast: pd.DataFrame
    history: pd.DataFrame
    series: list[Series]
    skill: pd.DataFrame
    overview: pd.DataFrame
    surprises: pd.DataFrame
    exceedances: pd.DataFrame
    freshness: pd.DataFrame
    quarantined: pd.DataFrame
    built_at: datetime = field(default_factory=lambda: datetime.now(UTC).replace(microsecond=0))
    earlier_reports: list[str] = field(default_factory=list)


def shown_model(con: duckdb.DuckDBPyConnection, cutoff: date | None, primary: str) -> str | None:
    """The primary model if it ran at the cutoff, else another real model, else the baseline."""
    if cutoff is None:
        return None
    models = queries.models_at(con, cutoff)
    if primary in models:
        return primary
    others = [m for m in models if m != REFERENCE]
    return others[0] if others else (models[0] if models else None)


def top_series(forecast: pd.DataFrame, n: int = TOP_SERIES) -> list[Series]:
    """World total, then the n largest destinations and origins by forecast arrivals over the horizon."""
    if forecast.empty:
        return []
    out = []
    if (forecast["level"] == "world_total").any():
        out.append(Series(("world_total", "*", "*"), "World total"))
    for level, side, prefix in (("destination_total", "destination", "Into"), ("origin_total", "origin", "From")):
        part = forecast[forecast["level"] == level]
        ranked = part.groupby(side)["mean"].sum().sort_values(ascending=False, kind="stable").head(n)
        for code in ranked.index:
            key = (level, "*", code) if side == "destination" else (level, code, "*")
            out.append(Series(key, f"{prefix} {code}"))
    return out


def select(frame: pd.DataFrame, key: tuple[str, str, str]) -> pd.DataFrame:
    if frame.empty:
        return frame
    level, origin, destination = key
    mask = (frame["level"] == level) & (frame["origin"] == origin) & (frame["destination"] == destination)
    return frame[mask]


def collect(con: duckdb.DuckDBPyConnection, cutoff: date | None, primary_model: str, horizon: int) -> ReportData:
    cutoff = cutoff or queries.newest_cutoff(con, primary_model)
    model = shown_model(con, cutoff, primary_model)
    forecast = queries.forecast_totals(con, cutoff, model) if model else pd.DataFrame()
    if not forecast.empty:
        horizon = int(forecast["horizon"].max())
    # reported totals are drawn only beside a forecast; without one the page never shows them
    history = queries.actual_totals(con, cutoff, HISTORY_MONTHS, horizon) if not forecast.empty else pd.DataFrame()
    focus = model if model and model != REFERENCE else primary_model
    return ReportData(
        cutoff=cutoff,
        requested_model=primary_model,
        model=model,
        horizon=horizon,
        forecast=forecast,
        history=history,
        series=top_series(forecast),
        skill=queries.skill(con),
        overview=queries.overview(con),
        surprises=queries.surprises(con, focus),
        exceedances=queries.exceedances(con, focus),
        freshness=queries.freshness(con),
        quarantined=queries.quarantined(con),
    )
