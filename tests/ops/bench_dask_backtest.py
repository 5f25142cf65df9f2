"""Measure a backtest with in-process threads against the same backtest on a local Dask cluster.

Not a test (pytest does not collect it). Run with a Prefect server for stable timings, e.g.
    OPENBLAS_NUM_THREADS=1 PREFECT_API_URL=http://127.0.0.1:4200/api \
        .venv/bin/python tests/ops/bench_dask_backtest.py --origins 12 --destinations 30 --cutoffs 6
Prints wall-clock seconds of each variant and the speed-up (threads time / Dask time).
"""

from __future__ import annotations

import argparse
import os
import shutil
import tempfile
import time
from pathlib import Path


def build(root: Path, args: argparse.Namespace) -> Path:
    from dyadcast.demo.drops import write_history_drop
    from dyadcast.demo.scenario import generate_scenario
    from dyadcast.ingest import ingest_inbox
    from dyadcast.warehouse import open_warehouse
    from dyadcast.workspace import init_workspace

    ws = init_workspace(root / "template")
    models = ", ".join(f'"{m}"' for m in args.models.split(","))
    ws.config_path.write_text(f"[forecast]\nhorizon = 6\nmodels = [{models}]\ntraining_window_months = 36\n",
                              encoding="utf-8")
    scenario = generate_scenario(seed=5, start="2019-01", end="2023-12", n_origins=args.origins,
                                 n_destinations=args.destinations)
    write_history_drop(scenario, "2023-12", ws.inbox)
    with open_warehouse(ws.warehouse_path) as con:
        print(ingest_inbox(ws, con).headline())
    return ws.root


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--origins", type=int, default=12)
    parser.add_argument("--destinations", type=int, default=30)
    parser.add_argument("--cutoffs", type=int, default=6)
    parser.add_argument("--workers", type=int, default=2)
    parser.add_argument("--models", default="persistence,poisson_glm,negative_binomial")
    parser.add_argument("--variants", default="threads,dask-local,dask-address")
    args = parser.parse_args()
    os.environ.setdefault("PREFECT_LOGGING_LEVEL", "WARNING")
    os.environ.setdefault("DASK_LOGGING__DISTRIBUTED", "error")
    from distributed import LocalCluster

    from dyadcast.months import add_months, format_month, parse_month
    from flows.backtest import backtest
    from flows.runners import make_task_runner

    root = Path(tempfile.mkdtemp(prefix="dyadcast-bench-"))
    template = build(root, args)
    end = parse_month("2023-10")
    start = format_month(add_months(end, -(args.cutoffs - 1)))
    timings = {}
    for label in args.variants.split(","):
        ws = root / label
        shutil.copytree(template, ws)
        cluster = None
        if label == "threads":
            runner = make_task_runner(None)
        elif label == "dask-local":
            runner = make_task_runner("local", workers=args.workers)  # cluster start-up is inside the timing
        else:
            cluster = LocalCluster(n_workers=args.workers, threads_per_worker=1, dashboard_address=None)
            runner = make_task_runner(cluster.scheduler_address)
        started = time.perf_counter()
        backtest.with_options(task_runner=runner)(workspace=str(ws), start=start, end=format_month(end))
        timings[label] = time.perf_counter() - started
        if cluster is not None:
            cluster.close()
        print(f"{label:<13} {timings[label]:7.1f} s", flush=True)
    print(f"cores {os.cpu_count()}, load average {os.getloadavg()[0]:.1f}; {args.origins}x{args.destinations} "
          f"dyads, {args.cutoffs} cutoffs, models {args.models}, {args.workers} Dask workers")
    for label in ("dask-local", "dask-address"):
        if "threads" in timings and label in timings:
            print(f"speed-up threads/{label:<12} {timings['threads'] / timings[label]:.2f}")
    shutil.rmtree(root, ignore_errors=True)


if __name__ == "__main__":
    main()
