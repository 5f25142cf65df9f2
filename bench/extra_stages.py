"""Stages beyond the monthly cycle: the other models under a time limit each, and the cycle under Prefect.

Other models: the features are built once, then each model is fitted in a forked process (it inherits the
prepared frames without copying them), which is stopped when it exceeds the per-model budget; the result
says "skipped: over N s" rather than blocking `make bench`. A tweedie_gbm "refresh" fit (power and rounds
taken from the cycle's fitted state, as a monthly refresh would) is measured the same way.
"""

from __future__ import annotations

import json
import multiprocessing
import sys
import time
from typing import Any

from meter import Meter, max_rss_mb
from stages import EXTRA_MODELS, REPO, Context, _quiet, drop_into_inbox


def _fit_in_child(name: str, options: dict[str, Any], data: Any, config: Any, conn: Any) -> None:
    from dyadcast import cycle

    started = time.perf_counter()
    try:
        result = cycle.fit_and_forecast(name, data, config, options)
        conn.send({"status": "ok", "wall_s": round(time.perf_counter() - started, 2),
                   "timings": {k: round(v, 2) for k, v in result.metadata["timings"].items()},
                   "rows": int(len(result.forecast)), "peak_rss_mb": round(max_rss_mb(), 1)})
    except Exception as exc:  # reported in the table, not raised: one model must not stop the others
        conn.send({"status": f"failed: {type(exc).__name__}: {str(exc)[:200]}",
                   "wall_s": round(time.perf_counter() - started, 2), "peak_rss_mb": round(max_rss_mb(), 1)})
    finally:
        conn.close()


def _timed_fit(name: str, options: dict[str, Any], data: Any, config: Any, budget_s: float) -> dict[str, Any]:
    fork = multiprocessing.get_context("fork")
    receive, send = fork.Pipe(duplex=False)
    process = fork.Process(target=_fit_in_child, args=(name, options, data, config, send), daemon=True)
    started = time.perf_counter()
    process.start()
    send.close()
    if receive.poll(budget_s):
        try:
            result = receive.recv()
        except EOFError:
            result = {"status": "failed: the fit process died without a result (out of memory?)"}
    else:
        result = {"status": f"skipped: over the {budget_s:.0f} s budget per model (stopped)"}
    if process.is_alive():
        process.terminate()  # this process started it; stop only it
    process.join(timeout=10)
    result.setdefault("wall_s", round(time.perf_counter() - started, 2))
    return result


def models_extra(ctx: Context, meter: Meter) -> None:
    """Each other registered model on the cycle's features (workspace ws_cycle, cutoff = the new month)."""
    from dyadcast import cycle
    from dyadcast.warehouse import open_warehouse

    ws = ctx.ws("cycle")
    config = ws.config()
    cutoff = ctx.new_month
    with open_warehouse(ws.warehouse_path, read_only=True) as con, meter.stage("features"):
        data = cycle.prepare(con, config, cutoff, ctx.as_of(cutoff), progress=_quiet)
    cycle_state = ctx.work / "results" / "cycle.json"
    runs: list[tuple[str, str, dict[str, Any]]] = [(m, m, {}) for m in EXTRA_MODELS]
    if cycle_state.exists():
        state = json.loads(cycle_state.read_text()).get("extra", {}).get("tweedie_fitted_state")
        if state:
            runs.insert(0, ("tweedie_gbm_refresh", "tweedie_gbm", {"params": state, "tune": False}))
    for label, name, options in runs:
        result = _timed_fit(name, options, data, config, ctx.model_budget_s)
        meter.records.append({"stage": f"fit_forecast_{label}", **result,
                              "peak_source": "ru_maxrss of the fit process"})
        meter.extra["done"] = label
        print(f"  {label}: {result.get('status')} {result.get('wall_s')} s", file=sys.stderr, flush=True)


def prefect_flow(ctx: Context, meter: Meter) -> None:
    """The monthly-cycle flow on a copy of ws_12: server start, then the flow itself (persistence only)."""
    from dyadcast.prefect_env import configure_prefect

    ws = ctx.ws("flow")
    configure_prefect(ws.prefect_home)
    with meter.stage("prefect_import"):
        from prefect import flow

    @flow(name="bench-noop")
    def noop() -> int:
        return 1

    with meter.stage("prefect_server_start", note="first flow run of the process: temporary server start"):
        noop()
    sys.path.insert(0, str(REPO))  # the repository root, for `flows`
    from dyadcast.ingest.validate import get_runner
    from flows.monthly_cycle import monthly_cycle

    with meter.stage("gx_startup"):
        get_runner()
    drop_into_inbox(sorted(ctx.drops("month").iterdir()), ws)
    with meter.stage("flow_monthly_cycle", models=["persistence"]) as rec:
        out = monthly_cycle(str(ws.root), as_of=ctx.as_of(ctx.new_month).isoformat(), models=["persistence"])
        rec["snapshots"] = len(out["snapshots"])


EXTRA_STAGES = {"models_extra": models_extra, "prefect": prefect_flow}
