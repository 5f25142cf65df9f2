"""The benchmark stages. Each runs in a fresh process (`run_bench.py --child NAME`) and measures its parts
with `Meter`, so one stage's memory never inflates another's.

Work folder layout (bench/output/<scale>/): drops/{history,month,dense}, workspaces ws_base (history only),
ws_12 / ws_120 (history + stored runs, scored), ws_cycle / ws_flow (copies of ws_12 for the monthly cycle
without and with Prefect), results/<stage>.json.
"""

from __future__ import annotations

import json
import os
import shutil
import sys
import time
from collections.abc import Callable
from dataclasses import dataclass, replace
from datetime import date
from pathlib import Path
from typing import Any

import global_panel as gp
import pandas as pd
import pandas_features
import pyarrow.parquet as pq
from meter import Meter
from seed_runs import copy_scored_state, mode_of, monthly_options, plan, seed_runs, source_forecast

from dyadcast.config import DEFAULT_TOML, Config
from dyadcast.months import add_months, format_month
from dyadcast.workspace import Workspace, init_workspace, open_workspace

REPO = Path(__file__).resolve().parents[1]
CYCLE_MODELS = ("persistence", "tweedie_gbm")
EXTRA_MODELS = ("seasonal_persistence", "rolling_mean", "poisson_glm", "negative_binomial", "hurdle_nb", "zinb",
                "ppml_gravity", "ensemble")
SAMPLE_DYADS = 300
REFRESHED_MODEL = "tweedie_gbm"  # the cycle's model with a stored state; seed_12 gives it a genuine snapshot
PREVIOUS_FIT_STAGE = f"previous_{REFRESHED_MODEL}_fit_forecast"


@dataclass(frozen=True)
class Context:
    work: Path
    spec: gp.PanelSpec
    scale: str
    model_budget_s: float = 120.0  # per extra model

    @property
    def months(self) -> list[date]:
        return gp.month_starts(self.spec)

    @property
    def new_month(self) -> date:  # the month of the monthly drop
        return self.months[-1]

    @property
    def last_history_month(self) -> date:
        return self.months[-2]

    def as_of(self, cutoff: date) -> date:
        return gp.publication(cutoff)

    def drops(self, part: str) -> Path:
        return self.work / "drops" / part

    def ws_dir(self, name: str) -> Path:
        return self.work / f"ws_{name}"

    def ws(self, name: str) -> Workspace:
        return open_workspace(self.ws_dir(name))

    def config(self) -> Config:
        return Config(models=CYCLE_MODELS, primary_model="tweedie_gbm")

    def window_start(self, cutoff: date) -> date:
        config = self.config()
        return add_months(cutoff, -(config.training_window_months + config.horizon))


def new_workspace(path: Path) -> Workspace:
    """A fresh workspace whose configuration runs the two cycle models."""
    shutil.rmtree(path, ignore_errors=True)
    ws = init_workspace(path)
    text = DEFAULT_TOML.replace('models = ["persistence", "poisson_glm"]', f"models = {json.dumps(list(CYCLE_MODELS))}")
    text = text.replace('primary_model = "poisson_glm"', 'primary_model = "tweedie_gbm"')
    ws.config_path.write_text(text, encoding="utf-8")
    if ws.config().models != CYCLE_MODELS:
        raise RuntimeError(f"{ws.config_path}: could not set models to {CYCLE_MODELS}; DEFAULT_TOML changed shape")
    return ws


def clone(source: Path, target: Path) -> None:
    shutil.rmtree(target, ignore_errors=True)
    shutil.copytree(source, target)


def drop_into_inbox(files: list[Path], ws: Workspace) -> None:
    for path in files:
        target = ws.inbox / path.name
        try:
            os.link(path, target)  # the ingest moves the inbox file; the drop stays for the next stage
        except OSError:
            shutil.copy(path, target)


def folder_mb(path: Path) -> float:
    return round(sum(p.stat().st_size for p in path.rglob("*") if p.is_file()) / 1e6, 1)


def _ingest(meter: Meter, ws: Workspace, con: Any, files: list[Path], stage: str) -> None:
    from dyadcast.ingest import ingest_inbox
    from dyadcast.ingest.validate import get_runner

    with meter.stage("gx_startup", note="Great Expectations import + context, once per process"):
        get_runner()
    drop_into_inbox(files, ws)
    with meter.stage(stage) as rec:
        summary = ingest_inbox(ws, con)
        rec["rows_by_kind"] = summary.rows_by_kind
        rec["files"] = {f.file: {"status": f.status, "rows": f.rows, "seconds": round(f.seconds, 2)}
                        for f in summary.files}
    if not summary.ok:
        raise RuntimeError(f"{stage}: ingest rejected files: {[f.reason for f in summary.rejected]}")


# --- stages ----------------------------------------------------------------------------------------------

def generate(ctx: Context, meter: Meter) -> None:
    shutil.rmtree(ctx.work / "drops", ignore_errors=True)
    with meter.stage("simulate") as rec:
        panel = gp.simulate(ctx.spec)
        rec.update(dyads=ctx.spec.n_dyads, months=ctx.spec.n_months, zero_share=round(panel.zero_share, 4))
    with meter.stage("write_drops") as rec:
        files = {**gp.write_history(panel, ctx.drops("history")), **{
            f"month_{k}": p for k, p in gp.write_month(panel, ctx.drops("month")).items()}}
        files["dense"] = gp.write_dense(panel, ctx.drops("dense"))
        rec["rows"] = {k: pq.read_metadata(p).num_rows for k, p in files.items()}


def backfill(ctx: Context, meter: Meter) -> None:
    from dyadcast.warehouse import open_warehouse

    ws = new_workspace(ctx.ws_dir("base"))
    with open_warehouse(ws.warehouse_path) as con:
        _ingest(meter, ws, con, sorted(ctx.drops("history").iterdir()), "backfill_ingest")
    meter.extra["warehouse_mb"] = folder_mb(ws.root)


def backfill_dense(ctx: Context, meter: Meter) -> None:
    from dyadcast.warehouse import open_warehouse

    ws = new_workspace(ctx.ws_dir("dense"))
    try:
        with open_warehouse(ws.warehouse_path) as con:
            _ingest(meter, ws, con, sorted(ctx.drops("dense").iterdir()), "dense_flows_ingest")
    finally:
        shutil.rmtree(ws.root, ignore_errors=True)


def _feature_args(ctx: Context) -> tuple[date, date, int, date]:
    cutoff = ctx.last_history_month
    return cutoff, ctx.as_of(cutoff), ctx.config().horizon, ctx.window_start(cutoff)


def _sample(frame: pd.DataFrame, ctx: Context) -> pd.DataFrame:
    dyads = frame[["origin", "destination"]].drop_duplicates().sample(
        n=min(SAMPLE_DYADS, len(frame)), random_state=ctx.spec.seed)
    return frame.merge(dyads, on=["origin", "destination"])


def features_pandas(ctx: Context, meter: Meter) -> None:
    from dyadcast.warehouse import open_warehouse

    cutoff, as_of, horizon, start = _feature_args(ctx)
    with open_warehouse(ctx.ws("base").warehouse_path, read_only=True) as con, \
            meter.stage("pandas_load_raw") as rec:
        raw = pandas_features.load_raw(con)
        rec["rows"] = int(len(raw["flows"]))
    with meter.stage("pandas_features", cutoff=format_month(cutoff), as_of=str(as_of)) as rec:
        panel = pandas_features.dense_panel(raw, cutoff, as_of)
        frame = pandas_features.dyad_features(panel, pandas_features.visible(raw["attributes"], as_of), horizon, start)
        rec.update(panel_rows=int(len(panel)), rows=int(len(frame)), columns=int(frame.shape[1]))
    _sample(frame, ctx).to_parquet(ctx.work / "pandas_sample.parquet")


def features_sql(ctx: Context, meter: Meter) -> None:
    """The dyad_features macro alone (what the pandas baseline computes), the same columns as the feature build
    computes them (dyadcast.grid), then the value checks of both against the pandas sample."""
    from dyadcast.grid import history_grid
    from dyadcast.warehouse import open_warehouse

    cutoff, as_of, horizon, start = _feature_args(ctx)
    with open_warehouse(ctx.ws("base").warehouse_path) as con, \
            meter.stage("sql_dyad_features", note="the dyad_features macro to Arrow, no Python columns") as rec:
        table = con.sql("SELECT * FROM dyad_features(?, ?, ?, ?)", params=[as_of, cutoff, horizon, start]
                        ).to_arrow_table()
        rec.update(rows=table.num_rows, columns=table.num_columns)
    with open_warehouse(ctx.ws("base").warehouse_path) as con, \
            meter.stage("grid_dyad_features", note="the same columns as the feature build makes them: DuckDB set "
                        "work (sql/30_05..30_07) + numpy windows (dyadcast.grid)") as rec:
        grid = history_grid(con, as_of, cutoff, horizon, start)
        rec.update(rows=grid.n_dyads * grid.n_anchors, columns=len(grid.columns) + len(grid.targets))
    sample_path = ctx.work / "pandas_sample.parquet"
    if sample_path.exists():
        expected = pd.read_parquet(sample_path)
        dyads = expected[["origin", "destination"]].drop_duplicates()
        got = pandas_features.frame_from_arrow(table, horizon).merge(dyads, on=["origin", "destination"])
        meter.extra["pandas_vs_sql"] = pandas_features.compare(expected, got[list(expected.columns)])
        got = pandas_features.frame_from_grid(grid).merge(dyads, on=["origin", "destination"])
        meter.extra["pandas_vs_grid"] = pandas_features.compare(expected, got[list(expected.columns)])


def seed(ctx: Context, meter: Meter, n_runs: int, genuine: bool = False) -> None:
    """ws_<n>: the history plus `n_runs` stored runs (two models per month), in the state a monthly user has.

    The two runs of the month six before the newest are scored for real (all their targets but one are
    known); every other run gets a copy of that scored state (seed_runs.copy_scored_state explains why).
    `genuine` (ws_12, which the cycle stages copy): the newest tweedie_gbm run is a real one instead of a copy
    (`previous_run`), so the cycle refreshes from a genuine fitted state and boosters, and last month's report
    is built (`previous_report`), so the cycle's report only brings its summaries up to date. ws_120 builds
    none: its first report, over the whole log, is the stage `report_120`.
    """
    from dyadcast.report import build_report
    from dyadcast.scoring import score_pending
    from dyadcast.warehouse import open_warehouse

    clone(ctx.ws_dir("base"), ctx.ws_dir(str(n_runs)))
    ws = ctx.ws(str(n_runs))
    newest = ctx.last_history_month
    runs = [r for r in plan(newest, n_runs, CYCLE_MODELS) if not (genuine and r == (newest, REFRESHED_MODEL))]
    template_cutoff = add_months(newest, -(ctx.config().horizon - 1))
    as_of = {cutoff: ctx.as_of(cutoff) for cutoff, _ in runs}
    with open_warehouse(ws.warehouse_path) as con:
        with meter.stage("source_forecast", note="one forecast-shaped frame, copied into every run") as rec:
            forecast = source_forecast(con, newest, ctx.as_of(newest), ctx.config().horizon)
            rec["rows"] = int(len(forecast))
        with meter.stage("write_template_runs"):
            templates = seed_runs(con, ws.snapshot_store(), forecast,
                                  [r for r in runs if r[0] == template_cutoff], as_of)
        with meter.stage("score_template_runs", note="genuine scoring of the two template runs") as rec:
            result = score_pending(con, ws.accuracy_store())
            rec.update(rows=result.rows_written, targets=result.targets_checked)
        rest = [r for r in runs if r[0] != template_cutoff]
        with meter.stage(f"write_{len(rest)}_more_runs") as rec:
            others = seed_runs(con, ws.snapshot_store(), forecast, rest, as_of)
            rec["forecast_rows"] = int(len(forecast) * n_runs)
        with meter.stage("copy_scored_state") as rec:
            rec["rows"] = copy_scored_state(con, ws.accuracy_store(), {t.model: t.run_id for t in templates},
                                            [r.run_id for r in others], newest)
        if genuine:
            previous_run(ctx, meter, ws, con, newest)
            with meter.stage("previous_report", note="setup, not a target: the report of the newest history month, "
                             "as last month's cycle built it; the first build after an upgrade, summarising the log"):
                build_report(con, ws, newest)
        counts = {t: con.execute(f"SELECT count(*) FROM {t}").fetchall()[0][0]
                  for t in ("snapshot_runs", "forecast_rows", "accuracy_rows", "scoring_checks")}
    meter.extra.update(workspace_mb=folder_mb(ws.root), table_rows=counts)


def score_new_month(ctx: Context, meter: Meter, n_runs: int, report: bool = True) -> None:
    """Ingest the new month's drop, then time the scoring it triggers and (`report`) the report after it."""
    from dyadcast.report import build_report
    from dyadcast.scoring import score_pending
    from dyadcast.warehouse import open_warehouse

    ws = ctx.ws(str(n_runs))
    with open_warehouse(ws.warehouse_path) as con:
        _ingest(meter, ws, con, sorted(ctx.drops("month").iterdir()), "monthly_ingest")
        stored = con.execute("SELECT count(*) FROM snapshot_runs").fetchall()[0][0]
        with meter.stage(f"score_{n_runs}_stored", stored_runs=int(stored)) as rec:
            result = score_pending(con, ws.accuracy_store())
            rec.update(rows=result.rows_written, runs_scored=len(result.runs_scored), targets=result.targets_checked)
        if report:
            with meter.stage(f"report_{n_runs}_stored", note="the previous report's summaries brought up to date"):
                build_report(con, ws, ctx.new_month)


def first_report(ctx: Context, meter: Meter, n_runs: int) -> None:
    """The report of a workspace with `n_runs` stored runs that never built one: its accuracy summaries are
    built from the whole log (a one-off, as after an upgrade; later reports only add the new batches)."""
    from dyadcast.report import build_report
    from dyadcast.warehouse import open_warehouse

    ws = ctx.ws(str(n_runs))
    with open_warehouse(ws.warehouse_path) as con:
        rows = con.execute("SELECT count(*) FROM accuracy_rows").fetchall()[0][0]
        with meter.stage(f"first_report_{n_runs}_stored", accuracy_rows=int(rows),
                         note="one-off: the summaries of the whole log built at once"):
            build_report(con, ws, ctx.new_month)


def monthly_cycle(ctx: Context, meter: Meter) -> None:
    """The monthly cycle as the flow runs it (flows/monthly_cycle.py), stage by stage, without Prefect.

    Same calls and order as flows/steps.py: features once, every model fitted and snapshotted (persistence
    first), the feature data released (the flow's forecast step returns only the snapshot references), then
    scoring and the report. The workspace is in the state last month's cycle left it (seed: stored runs, the
    previous report).
    """
    import gc

    from dyadcast import cycle
    from dyadcast.report import build_report
    from dyadcast.scoring import score_pending
    from dyadcast.warehouse import open_warehouse

    ws = ctx.ws("cycle")
    config = ws.config()
    cutoff = ctx.new_month
    with open_warehouse(ws.warehouse_path) as con:
        _ingest(meter, ws, con, sorted(ctx.drops("month").iterdir()), "monthly_ingest")
        with meter.stage("features") as rec:
            data = cycle.prepare(con.cursor(), config, cutoff, ctx.as_of(cutoff), progress=_quiet)
            rec.update(rows=int(len(data.train) + len(data.rows)), active_train_rows=int(len(data.active_train)),
                       dyads=int(len(data.rows)), dormant=int(len(data.dormant_rows)))
        for name in cycle.models_to_run(config):
            _fit_and_snapshot(meter, ws, con, data, config, name)
        del data
        gc.collect()
        with meter.stage("score") as rec:
            scored = score_pending(con, ws.accuracy_store())
            rec.update(rows=scored.rows_written, runs_scored=len(scored.runs_scored))
        with meter.stage("report"):
            build_report(con, ws, cutoff)
    meter.extra["monthly_mode"] = config.monthly_mode
    meter.extra[f"{REFRESHED_MODEL}_fit_mode"] = _previous_fit_line(ctx)


def _previous_fit_line(ctx: Context) -> dict[str, Any] | str:
    """The "fit" mode line of the same model at full scale: measured by seed_12 (one month earlier)."""
    path = ctx.work / "results" / "seed_12.json"
    records = json.loads(path.read_text()).get("records", []) if path.exists() else []
    line = next((r for r in records if r.get("stage") == PREVIOUS_FIT_STAGE), None)
    return {**line, "measured_in": f"seed_12, stage {PREVIOUS_FIT_STAGE}"} if line else "not measured (run seed_12)"


def _fit_and_snapshot(meter: Meter, ws: Workspace, con: Any, data: Any, config: Config, name: str) -> None:
    """Fit with the options a monthly run gives the model (its mode and the stored state), then snapshot."""
    from dyadcast import cycle
    from dyadcast.snapshots import index_snapshot

    options, source = monthly_options(con, name, config.monthly_mode, data.cutoff)
    with meter.stage(f"fit_forecast_{name}", mode=mode_of(options), options_from=source) as rec:
        result = cycle.fit_and_forecast(name, data, config, options)
        rec["timings"] = {k: round(v, 2) for k, v in result.metadata["timings"].items()}
        rec.update(_refresh_record(result.metadata["fitted_state"]))
    with meter.stage(f"snapshot_{name}") as rec:
        ref = cycle.write_forecast(ws.snapshot_store(), data, result)
        rec["indexed_rows"] = index_snapshot(con, ref, data.run_kind, data.as_of)
    if name == REFRESHED_MODEL:
        meter.extra["tweedie_fitted_state"] = result.metadata["fitted_state"]


def _refresh_record(state: dict[str, Any]) -> dict[str, Any]:
    """How a model with a stored state ran: fitted, refitted or continued, and why (tweedie_gbm's record)."""
    keys = ("refresh_method", "refresh_note", "continuations", "power", "rounds", "booster_rounds")
    return {k: state[k] for k in keys if isinstance(state, dict) and k in state}


def previous_run(ctx: Context, meter: Meter, ws: Workspace, con: Any, cutoff: date) -> None:
    """A genuine tweedie_gbm snapshot at the newest history month, made as a monthly run makes it.

    Setup for the cycle stage, not a target: the options come from `monthly_options` (with only benchmark
    copies before it, that is "fit" mode, as in a first run), and the fit's line is also the benchmark's
    figure for "fit" mode at full scale (`PREVIOUS_FIT_STAGE`; the cycle stage points to it).
    """
    from dyadcast import cycle
    from dyadcast.snapshots import index_snapshot

    config = ws.config()
    with meter.stage("previous_features", note="setup, not a target: features at the newest history month"):
        data = cycle.prepare(con.cursor(), config, cutoff, ctx.as_of(cutoff), progress=_quiet)
    options, source = monthly_options(con, REFRESHED_MODEL, config.monthly_mode, cutoff)
    with meter.stage(PREVIOUS_FIT_STAGE, mode=mode_of(options), options_from=source,
                     note="setup, not a target: the snapshot the cycle refreshes from") as rec:
        result = cycle.fit_and_forecast(REFRESHED_MODEL, data, config, options)
        rec["timings"] = {k: round(v, 2) for k, v in result.metadata["timings"].items()}
        rec.update(_refresh_record(result.metadata["fitted_state"]))
    with meter.stage(f"previous_snapshot_{REFRESHED_MODEL}") as rec:
        ref = cycle.write_forecast(ws.snapshot_store(), data, result)
        rec.update(indexed_rows=index_snapshot(con, ref, data.run_kind, data.as_of), run_id=ref.run_id,
                   artifacts=sorted(p.name for p in (ref.path / "artifacts").glob("*")))


def _quiet(_: str) -> None:
    return None


STAGES: dict[str, Callable[[Context, Meter], None]] = {
    "generate": generate,
    "backfill": backfill,
    "backfill_dense": backfill_dense,
    "features_pandas": features_pandas,
    "features_sql": features_sql,
    "seed_12": lambda ctx, meter: seed(ctx, meter, 12, genuine=True),
    "seed_120": lambda ctx, meter: seed(ctx, meter, 120),
    "score_12": lambda ctx, meter: score_new_month(ctx, meter, 12),
    "score_120": lambda ctx, meter: score_new_month(ctx, meter, 120, report=False),
    "report_120": lambda ctx, meter: first_report(ctx, meter, 120),
    "cycle": monthly_cycle,
}


def run_child(name: str, ctx: Context) -> int:
    """Entry point of a child process: run one stage, write results/<name>.json."""
    from extra_stages import EXTRA_STAGES

    stages = {**STAGES, **EXTRA_STAGES}
    meter = Meter(ctx.work / "results" / f"{name}.json")
    meter.extra["pid"] = os.getpid()
    started = time.perf_counter()
    try:
        stages[name](ctx, meter)
    except Exception as exc:  # recorded for the table; the traceback goes to the log
        meter.extra["error"] = f"{type(exc).__name__}: {exc}"
        import traceback

        traceback.print_exc(file=sys.stderr)
        return 1
    finally:
        meter.extra["stage_seconds"] = round(time.perf_counter() - started, 2)
        meter.close()
    return 0


def context(work: Path, small: bool, model_budget_s: float = 120.0) -> Context:
    spec = gp.SMALL if small else gp.FULL
    return Context(work=work, spec=spec, scale="small" if small else "full", model_budget_s=model_budget_s)


def with_spec(ctx: Context, spec: gp.PanelSpec) -> Context:
    return replace(ctx, spec=spec)
