"""Stages beyond the monthly cycle: the other models under a time limit each, and the cycle under Prefect.

Prefect: `prefect` times the import, the temporary server's start and the monthly-cycle flow (the cycle's
models) in one process; `prefect_server` starts `prefect server start` first, as a scheduled deployment has
it, and times the same flow against it (the server's start reported apart, as the issue asks).

Other models: the features are built once, then each model is fitted in a forked process (it inherits the
prepared frames without copying them), which is stopped when it exceeds the per-model budget; the result
says "skipped: over N s" rather than blocking `make bench`. A tweedie_gbm "refresh" fit (power and rounds
taken from the cycle's fitted state, as a monthly refresh would) is measured the same way.
"""

from __future__ import annotations

import json
import multiprocessing
import os
import socket
import subprocess
import sys
import time
import urllib.request
from pathlib import Path
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
            # last: the cycle already measured the refresh that continues the boosters; this is the refit with
            # the stored power and rounds (snapshots in an object store, or after max_continuations)
            runs.append(("tweedie_gbm_refit_stored_params", "tweedie_gbm", {"params": state, "tune": False}))
    for label, name, options in runs:
        result = _timed_fit(name, options, data, config, ctx.model_budget_s)
        meter.records.append({"stage": f"fit_forecast_{label}", **result,
                              "peak_source": "ru_maxrss of the fit process"})
        meter.extra["done"] = label
        meter.save()  # each fit is kept if the stage is stopped at its cap during the next one
        print(f"  {label}: {result.get('status')} {result.get('wall_s')} s", file=sys.stderr, flush=True)


def prefect_flow(ctx: Context, meter: Meter) -> None:
    """The monthly-cycle flow on a copy of ws_12: temporary server start, then the flow itself."""
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
    _timed_flow(ctx, meter, ws)


def _timed_flow(ctx: Context, meter: Meter, ws: Any) -> None:
    """The flow with the workspace's own configuration: the cycle's models, in the configured monthly mode."""
    sys.path.insert(0, str(REPO))  # the repository root, for `flows`
    from dyadcast.ingest.validate import get_runner
    from flows.monthly_cycle import monthly_cycle

    with meter.stage("gx_startup"):
        get_runner()
    drop_into_inbox(sorted(ctx.drops("month").iterdir()), ws)
    config = ws.config()
    with meter.stage("flow_monthly_cycle", models=list(config.models), mode=config.monthly_mode) as rec:
        out = monthly_cycle(str(ws.root), as_of=ctx.as_of(ctx.new_month).isoformat())
        rec["snapshots"] = len(out["snapshots"])


def _free_port() -> int:
    with socket.socket() as sock:
        sock.bind(("127.0.0.1", 0))
        return int(sock.getsockname()[1])


def _wait_healthy(url: str, server: subprocess.Popen, timeout_s: float) -> None:
    deadline = time.monotonic() + timeout_s
    while time.monotonic() < deadline:
        if server.poll() is not None:
            raise RuntimeError(f"prefect server exited with {server.returncode} before it was healthy; see its log")
        try:
            with urllib.request.urlopen(f"{url}/health", timeout=2) as response:
                if response.status == 200:
                    return
        except OSError:
            pass
        time.sleep(0.5)
    raise RuntimeError(f"prefect server not healthy at {url} after {timeout_s:.0f} s")


def prefect_server_flow(ctx: Context, meter: Meter) -> None:
    """The same flow against a running `prefect server` (a copy of ws_12 of its own, so both stages start equal)."""
    ws = ctx.ws("server")
    home = ctx.work / "prefect_server_home"
    home.mkdir(parents=True, exist_ok=True)
    port = _free_port()
    url = f"http://127.0.0.1:{port}/api"
    env = {**os.environ, "PREFECT_HOME": str(home), "PREFECT_SERVER_ANALYTICS_ENABLED": "false",
           "PREFECT_LOGGING_LEVEL": "WARNING"}
    prefect_cli = Path(sys.executable).with_name("prefect")
    with open(ctx.work / "logs" / "prefect_server_process.log", "w") as log:
        with meter.stage("prefect_server_start", note="prefect server start until /api/health answers"):
            server = subprocess.Popen(
                [str(prefect_cli), "server", "start", "--host", "127.0.0.1", "--port", str(port), "--no-ui"],
                env=env, stdout=log, stderr=subprocess.STDOUT,
            )
            try:
                _wait_healthy(url, server, 180)
            except Exception:
                server.terminate()
                raise
        try:
            os.environ.update(PREFECT_API_URL=url, PREFECT_HOME=str(home / "client"))
            from dyadcast.prefect_env import configure_prefect

            configure_prefect(home / "client")
            with meter.stage("prefect_import"):
                from prefect import flow  # noqa: F401 - the import's cost, against a server this time
            _timed_flow(ctx, meter, ws)
        finally:
            server.terminate()  # the server this stage started, nothing else
            try:
                server.wait(timeout=30)
            except subprocess.TimeoutExpired:
                server.kill()


EXTRA_STAGES = {"models_extra": models_extra, "prefect": prefect_flow, "prefect_server": prefect_server_flow}
