"""Thin Prefect tasks around the plain stage functions of `dyadcast`; no logic lives here."""

from __future__ import annotations

from collections import deque
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from datetime import date
from typing import Any

import duckdb
from prefect import task
from prefect.cache_policies import NO_CACHE

from dyadcast import cycle
from dyadcast.config import Config
from dyadcast.snapshots import (
    METADATA_FILE,
    SnapshotRef,
    index_snapshot,
    new_run_id,
    reindex_missing,
    snapshot_dir,
)
from dyadcast.stores import ACCURACY_TEMP_GLOBS, clean_temporary
from dyadcast.workspace import Workspace


def say(message: str) -> None:
    print(message, flush=True)


@task(name="recover", retries=2, retry_delay_seconds=[1, 5], cache_policy=NO_CACHE)
def recover_step(con: duckdb.DuckDBPyConnection, ws: Workspace) -> int:
    """Finish what an interrupted run left: remove its temporary files, index snapshots it wrote."""
    clean_temporary(ws.snapshot_store(), log=say)
    clean_temporary(ws.accuracy_store(), globs=ACCURACY_TEMP_GLOBS, log=say)
    added = reindex_missing(con, ws.snapshot_store())
    if added:
        say(f"  indexed {added} snapshot(s) that an interrupted run wrote but did not index")
    return added


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
    data: cycle.PreparedData, config: Config, members: dict[str, cycle.ModelForecast], accuracy: Any,
    options: dict[str, Any],
) -> cycle.ModelForecast:
    return _said(cycle.ensemble_forecast(data, config, members, accuracy, options))


@task(name="snapshot", retries=2, retry_delay_seconds=[1, 5], cache_policy=NO_CACHE)
def snapshot_step(
    con: duckdb.DuckDBPyConnection, store: str, data: cycle.PreparedData, result: cycle.ModelForecast,
    run_id: str,
) -> SnapshotRef:
    """The run id comes from the caller, so a retry after a written-but-not-indexed snapshot indexes it
    instead of writing a second copy under a new id."""
    path = snapshot_dir(store, data.cutoff, result.model, run_id)
    if (path / METADATA_FILE).is_file():
        ref = SnapshotRef(run_id, data.cutoff, result.model, path)
    else:
        ref = cycle.write_forecast(store, data, result, run_id)
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


@dataclass
class CutoffInFlight:
    data: cycle.PreparedData
    futures: dict[str, Any]
    mode: str = "refresh"
    written: dict[str, SnapshotRef] = field(default_factory=dict)


def submit_cutoff(
    con: duckdb.DuckDBPyConnection, config: Config, cutoff: date, as_of: date, run_kind: str, models: list[str],
    mode: str,
) -> CutoffInFlight:
    """Features here (DuckDB stays in the flow process), then every model's fit on the task runner."""
    data = prepare_step(con, config, cutoff, as_of, run_kind)
    futures = {
        name: model_step.submit(name, data, config, cycle.model_options(con, name, mode, cutoff))
        for name in models if name != "ensemble"
    }
    return CutoffInFlight(data, futures, mode)


def write_cutoff(
    con: duckdb.DuckDBPyConnection, ws: Workspace, config: Config, job: CutoffInFlight, names: list[str]
) -> None:
    """Wait for the named models (the ensemble from its members), then write and index their snapshots."""
    for name in names:
        if name in job.written:
            continue
        if name == "ensemble":
            members = {n: f.result() for n, f in job.futures.items()}
            options = cycle.model_options(con, "ensemble", job.mode, job.data.cutoff)
            result = ensemble_step(job.data, config, members, cycle.accuracy_weights_source(con), options)
        else:
            result = job.futures[name].result()
        job.written[name] = snapshot_step(con, ws.snapshot_store(), job.data, result, new_run_id())


def forecast_cutoff(
    con: duckdb.DuckDBPyConnection, ws: Workspace, config: Config, cutoff: date, as_of: date, run_kind: str,
    models: list[str], mode: str | None = None,
) -> list[SnapshotRef]:
    """Features once, then every model concurrently, the ensemble from its members, then the snapshots."""
    job = submit_cutoff(con, config, cutoff, as_of, run_kind, models, mode or config.monthly_mode)
    write_cutoff(con, ws, config, job, models)
    return [job.written[name] for name in models]


def forecast_cutoffs(
    con: duckdb.DuckDBPyConnection, ws: Workspace, config: Config, cutoffs: Sequence[date],
    as_of: Callable[[date], date], run_kind: str, models: list[str], mode: str | None = None, in_flight: int = 3,
) -> list[SnapshotRef]:
    """Many cutoffs with the fits of up to `in_flight` cutoffs running at once; same snapshots as one by one.

    In refresh mode a model with hyper-parameters reuses those of its previous cutoff's snapshot, so its
    snapshot is written before the next cutoff is submitted; every other fit runs ahead freely.
    """
    mode = mode or config.monthly_mode
    # model_options(..., "fit", ...) is non-empty exactly for the models that have hyper-parameters
    carried = [n for n in models if mode == "refresh" and cycle.model_options(con, n, "fit", cutoffs[0])]
    jobs: deque[CutoffInFlight] = deque()
    refs: list[SnapshotRef] = []

    def retire_oldest() -> None:
        job = jobs.popleft()
        write_cutoff(con, ws, config, job, models)
        refs.extend(job.written[name] for name in models)

    for number, month in enumerate(cutoffs, 1):
        for job in jobs:
            write_cutoff(con, ws, config, job, carried)
        day = as_of(month)
        say(f"{run_kind} cutoff {month:%Y-%m} ({number}/{len(cutoffs)}), as of {day}")
        jobs.append(submit_cutoff(con, config, month, day, run_kind, models, mode))
        while len(jobs) >= max(1, in_flight):
            retire_oldest()
    while jobs:
        retire_oldest()
    return refs
