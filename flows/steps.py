"""Thin Prefect tasks around the plain stage functions of `dyadcast`; no logic lives here."""

from __future__ import annotations

from datetime import date
from typing import Any

import duckdb
from prefect import task
from prefect.cache_policies import NO_CACHE

from dyadcast import cycle
from dyadcast.config import Config
from dyadcast.snapshots import SnapshotRef, index_snapshot
from dyadcast.workspace import Workspace


def say(message: str) -> None:
    print(message, flush=True)


@task(name="ingest", retries=2, retry_delay_seconds=[1, 5], cache_policy=NO_CACHE)
def ingest_step(ws: Workspace, con: duckdb.DuckDBPyConnection) -> Any:
    from dyadcast.ingest import ingest_inbox

    return ingest_inbox(ws, con, progress=say)


@task(name="features", cache_policy=NO_CACHE)
def prepare_step(
    con: duckdb.DuckDBPyConnection, config: Config, cutoff: date, as_of: date, run_kind: str
) -> cycle.PreparedData:
    return cycle.prepare(con.cursor(), config, cutoff, as_of, run_kind, progress=say)


def _said(result: cycle.ModelForecast) -> cycle.ModelForecast:
    timings = result.metadata["timings"]
    say(f"  {result.model:<22} fit {timings['fit_s']:6.1f} s, predict {timings['predict_s']:5.1f} s")
    return result


@task(name="fit-and-forecast", cache_policy=NO_CACHE)
def model_step(
    name: str, data: cycle.PreparedData, config: Config, options: dict[str, Any]
) -> cycle.ModelForecast:
    return _said(cycle.fit_and_forecast(name, data, config, options))


@task(name="ensemble", cache_policy=NO_CACHE)
def ensemble_step(
    data: cycle.PreparedData, config: Config, members: dict[str, cycle.ModelForecast], accuracy: Any
) -> cycle.ModelForecast:
    return _said(cycle.ensemble_forecast(data, config, members, accuracy))


@task(name="snapshot", retries=2, retry_delay_seconds=[1, 5], cache_policy=NO_CACHE)
def snapshot_step(
    con: duckdb.DuckDBPyConnection, store: str, data: cycle.PreparedData, result: cycle.ModelForecast
) -> SnapshotRef:
    ref = cycle.write_forecast(store, data, result)
    index_snapshot(con, ref, data.run_kind, data.as_of)
    return ref


@task(name="score", retries=1, retry_delay_seconds=[2], cache_policy=NO_CACHE)
def score_step(con: duckdb.DuckDBPyConnection, ws: Workspace) -> Any:
    from dyadcast.scoring import score_pending

    return score_pending(con, ws.accuracy_store(), progress=say)


@task(name="report", retries=1, retry_delay_seconds=[2], cache_policy=NO_CACHE)
def report_step(con: duckdb.DuckDBPyConnection, ws: Workspace, cutoff: date | None) -> Any:
    """Rebuild the HTML report and post the digest and skill table as Prefect artifacts (seen in the UI)."""
    from prefect.artifacts import create_markdown_artifact, create_table_artifact

    from dyadcast.report import build_report, report_summary_markdown, skill_table

    path = build_report(con, ws, cutoff)
    create_markdown_artifact(
        report_summary_markdown(con, cutoff, ws.config().primary_model), key="accuracy-summary",
        description=f"Accuracy digest; the full report is {path}",
    )
    table = skill_table(con)
    if table:
        create_table_artifact(table, key="skill-vs-persistence", description="Relative WIS and MAE by horizon")
    return path


def post_ingest_summary(summary: Any) -> None:
    from prefect.artifacts import create_markdown_artifact

    if summary is not None:
        create_markdown_artifact(summary.to_markdown(), key="ingest-summary", description="Files in this run")


def forecast_cutoff(
    con: duckdb.DuckDBPyConnection, ws: Workspace, config: Config, cutoff: date, as_of: date, run_kind: str,
    models: list[str], mode: str | None = None,
) -> list[SnapshotRef]:
    """Features once, then every model concurrently, the ensemble from its members, then the snapshots."""
    data = prepare_step(con, config, cutoff, as_of, run_kind)
    mode = mode or config.monthly_mode
    futures = {
        name: model_step.submit(name, data, config, cycle.model_options(con, name, mode, cutoff))
        for name in models if name != "ensemble"
    }
    results = {name: future.result() for name, future in futures.items()}
    if "ensemble" in models:
        results["ensemble"] = ensemble_step(data, config, results, cycle.accuracy_weights_source(con))
    return [snapshot_step(con, ws.snapshot_store(), data, results[name]) for name in models]
