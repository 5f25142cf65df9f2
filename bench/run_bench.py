"""`make bench`: the pipeline at the users' scale (40,000 dyads x 240 months), stage by stage, on this machine.

Usage:
    .venv/bin/python bench/run_bench.py                 # full scale, about 10-15 min
    .venv/bin/python bench/run_bench.py --small         # 2,000 dyads x 60 months, about 3 min
    .venv/bin/python bench/run_bench.py --stages cycle --keep   # rerun stages on a kept work folder

Every stage runs in a fresh process (see bench/stages.py), measured by bench/meter.py. The table of wall
time and peak RSS per stage is printed and written to bench/output/results.json (results-small.json for
--small), together with the machine, the targets and whether each is met. bench/README.md explains it.
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import shutil
import signal
import subprocess
import sys
import time
from importlib import metadata
from pathlib import Path
from typing import Any

BENCH = Path(__file__).resolve().parent
os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")  # measured 2-4x faster on this box (shared/notes/models.md)

# (stage, time cap in seconds at full scale); small scale caps are a quarter. The order matters: clones of
# ws_12 for the cycle are taken after seed_12 and before score_12 ingests the new month into it.
PLAN: list[tuple[str, float]] = [
    ("generate", 120), ("backfill", 240), ("backfill_dense", 240), ("features_pandas", 300),
    ("features_sql", 240), ("seed_12", 300), ("score_12", 300), ("cycle", 600), ("prefect", 600),
    ("prefect_server", 600), ("seed_120", 900), ("score_120", 300), ("models_extra", 900), ("report_120", 900),
]
LIBRARIES = ("duckdb", "pandas", "pyarrow", "numpy", "lightgbm", "prefect", "great-expectations", "statsmodels",
             "pyfixest", "scikit-learn")
CYCLE_GROUP = "cycle"


def machine() -> dict[str, Any]:
    cpu = next((line.split(":", 1)[1].strip() for line in Path("/proc/cpuinfo").read_text().splitlines()
                if line.startswith("model name")), platform.processor())
    free = subprocess.run(["free", "-h"], capture_output=True, text=True).stdout.strip()
    versions = {"python": platform.python_version()}
    for name in LIBRARIES:
        try:
            versions[name] = metadata.version(name)
        except metadata.PackageNotFoundError:
            continue
    return {"nproc": os.cpu_count(), "cpu": cpu, "free_h": free, "versions": versions, "platform": platform.platform()}


def run_stage(name: str, args: argparse.Namespace, timeout: float) -> dict[str, Any]:
    """Run one stage in a new process group; stop the group (ours) when it exceeds `timeout`."""
    work: Path = args.work
    result_path = work / "results" / f"{name}.json"
    result_path.unlink(missing_ok=True)
    (work / "logs").mkdir(parents=True, exist_ok=True)
    command = [sys.executable, str(Path(__file__).resolve()), "--child", name, "--work", str(work),
               "--model-budget", str(args.model_budget)] + (["--small"] if args.small else [])
    started = time.perf_counter()
    with open(work / "logs" / f"{name}.log", "w") as log:
        child = subprocess.Popen(command, stdout=log, stderr=subprocess.STDOUT, start_new_session=True)
        try:
            code = child.wait(timeout=timeout)
            status = "ok" if code == 0 else f"failed (exit {code}, see {work / 'logs' / (name + '.log')})"
        except subprocess.TimeoutExpired:
            os.killpg(child.pid, signal.SIGKILL)  # the group of the child started above, nothing else
            child.wait()
            status = f"stopped at the {timeout:.0f} s cap"
    outcome = json.loads(result_path.read_text()) if result_path.exists() else {"records": [], "extra": {}}
    outcome.update(name=name, status=status, process_wall_s=round(time.perf_counter() - started, 2))
    running = outcome.get("running")
    if running and status != "ok":
        outcome["records"].append({"stage": running["stage"], "status": status,
                                   "wall_s": round(time.time() - running["started_unix"], 1)})
    return outcome


def _sum(records: list[dict[str, Any]], skip: tuple[str, ...] = ()) -> float:
    return round(sum(r.get("wall_s", 0.0) for r in records if r["stage"] not in skip), 2)


def _find(groups: dict[str, dict[str, Any]], group: str, stage: str) -> dict[str, Any] | None:
    """The stage's record if it finished; a record of a stage stopped at its cap is only a lower bound."""
    for record in groups.get(group, {}).get("records", []):
        if record["stage"] == stage and record.get("status") == "ok":
            return record
    return None


def _target(name: str, value: float | None, limit: float, unit: str, ok_if_below: bool = True,
            note: str = "") -> dict[str, Any]:
    if value is None:
        return {"target": name, "value": None, "limit": limit, "unit": unit, "met": None, "note": note or "not measured"}
    met = value <= limit if ok_if_below else value >= limit
    return {"target": name, "value": round(value, 2), "limit": limit, "unit": unit, "met": met, "note": note}


def _cpu_ratio(top: dict[str, Any] | None, bottom: dict[str, Any] | None) -> str:
    """The same ratio in CPU seconds: steadier than wall time when other jobs share the machine."""
    if not top or not bottom or not bottom.get("cpu_s"):
        return ""
    return f"CPU-time ratio {top['cpu_s'] / bottom['cpu_s']:.2f}"


def targets(groups: dict[str, dict[str, Any]], total_wall: float, small: bool,
            budget: float = 840.0) -> list[dict[str, Any]]:
    """Each figure against its target (the issue's numbers; at --small they are only indicative)."""
    out = []
    dense = _find(groups, "backfill_dense", "dense_flows_ingest")
    out.append(_target("backfill ingest of the dense flows file (every dyad-month)", dense and dense.get("wall_s"),
                       30, "s", note=f"{(dense or {}).get('rows_by_kind', {}).get('flows', 0):,} rows"))
    sparse = _find(groups, "backfill", "backfill_ingest")
    out.append(_target("backfill ingest, history of all five kinds (contract form)", sparse and sparse.get("wall_s"),
                       30, "s", note="flows rows: positive + explicit zero rows + revisions"))
    cycle = groups.get(CYCLE_GROUP, {})
    records = cycle.get("records", [])
    complete = cycle.get("status") == "ok"
    cycle_total = _target("monthly cycle without Prefect start (GX start included)", _sum(records) if records else None,
                          60, "s", note="" if complete else "incomplete (" + cycle.get("status", "not run") + "): "
                          "the value is a lower bound")
    if not complete and records:
        cycle_total["met"] = False if cycle_total["value"] > 60 else None
    out.append(cycle_total)
    peak = max((r.get("peak_rss_mb", 0.0) for r in records), default=None)
    out.append(_target("peak RSS of the monthly cycle", peak, 4096, "MB"))
    for group, label in (("prefect", "temporary server"), ("prefect_server", "running prefect server")):
        flow_rec, start = _find(groups, group, "flow_monthly_cycle"), _find(groups, group, "prefect_server_start")
        out.append(_target(f"monthly-cycle flow under Prefect, {label} (its start apart)",
                           flow_rec and flow_rec.get("wall_s"), 60, "s",
                           note=f"server start {start.get('wall_s')} s" if start else "not run"))
    pandas_rec = _find(groups, "features_pandas", "pandas_features")
    for group, stage, label in (("features_sql", "sql_dyad_features", "SQL dyad_features macro"),
                                ("features_sql", "grid_dyad_features", "feature build's dyad columns (DuckDB + numpy grid)"),
                                ("cycle", "features", "cycle features (build_features + dormant split)")):
        sql = _find(groups, group, stage)
        ratio = pandas_rec["wall_s"] / sql["wall_s"] if pandas_rec and sql and sql.get("wall_s") else None
        out.append(_target(f"pandas time / {label} time", ratio, 10, "x", ok_if_below=False,
                           note=_cpu_ratio(pandas_rec, sql)))
    s12, s120 = _find(groups, "score_12", "score_12_stored"), _find(groups, "score_120", "score_120_stored")
    ratio = s120["wall_s"] / s12["wall_s"] if s12 and s120 and s12.get("wall_s") else None
    out.append(_target("scoring time, 120 stored runs / 12 stored runs", ratio, 1.5, "x", note=_cpu_ratio(s120, s12)))
    for key, label in (("pandas_vs_sql", "SQL macro"), ("pandas_vs_grid", "grid build")):
        check = groups.get("features_sql", {}).get("extra", {}).get(key)
        out.append(_target(f"pandas baseline vs {label}: differing cells on the sample",
                           check and check["cells_differing"], 0, "cells",
                           note=f"{(check or {}).get('rows', 0):,} rows compared"))
    if budget > 0:
        out.append(_target("make bench wall time", total_wall, 900, "s"))
    else:
        out.append(_target("make bench wall time", None, 900, "s", note="run with --budget 0: no time limit"))
    if small:
        for row in out:
            row["note"] = ("small scale, indicative only; " + row["note"]).rstrip("; ")
    return out


def table(groups: dict[str, dict[str, Any]]) -> str:
    lines = ["| process | stage | wall s | CPU s | peak RSS MB | status |", "|---|---|---:|---:|---:|---|"]
    for name, outcome in groups.items():
        for r in outcome.get("records", []):
            cpu = r.get("cpu_s")
            lines.append(f"| {name} | {r['stage']} | {r.get('wall_s', '')} | {'' if cpu is None else cpu} | "
                         f"{r.get('peak_rss_mb', '')} | {r.get('status', '')} |")
        if outcome.get("status", "ok") != "ok" and not outcome.get("records"):
            lines.append(f"| {name} | (whole stage) | {outcome.get('process_wall_s', '')} | | | {outcome['status']} |")
    return "\n".join(lines)


def target_table(rows: list[dict[str, Any]]) -> str:
    lines = ["| target | measured | limit | met | note |", "|---|---:|---:|---|---|"]
    for t in rows:
        met = {True: "yes", False: "**no**", None: "n/a"}[t["met"]]
        op = ">=" if t["unit"] == "x" and "pandas" in t["target"] else "<="
        lines.append(f"| {t['target']} | {t['value']} {t['unit']} | {op} {t['limit']} {t['unit']} | {met} | {t['note']} |")
    return "\n".join(lines)


def parse(argv: list[str] | None) -> argparse.Namespace:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--small", action="store_true", help="2,000 dyads x 60 months, for quick iterations")
    parser.add_argument("--out", type=Path, default=BENCH / "output", help="folder for results and work files")
    parser.add_argument("--stages", default="", help="comma-separated subset of stages (needs a kept work folder)")
    parser.add_argument("--keep", action="store_true", help="keep the work folder (workspaces, drops) afterwards")
    parser.add_argument("--budget", type=float, default=840.0, help="stop starting stages after this many seconds (0: no limit)")
    parser.add_argument("--model-budget", type=float, default=None, help="seconds per extra model (default 120/30)")
    parser.add_argument("--cap-factor", type=float, default=1.0, help="multiply every stage's time cap")
    parser.add_argument("--child", default="", help=argparse.SUPPRESS)
    parser.add_argument("--work", type=Path, default=None, help=argparse.SUPPRESS)
    args = parser.parse_args(argv)
    args.work = args.work or args.out / ("work-small" if args.small else "work-full")
    if args.model_budget is None:
        args.model_budget = 30.0 if args.small else 120.0
    return args


def main(argv: list[str] | None = None) -> int:
    args = parse(argv)
    sys.path.insert(0, str(BENCH))
    if args.child:
        from stages import context, run_child

        return run_child(args.child, context(args.work, args.small, args.model_budget))
    from stages import clone

    wanted = [s for s in args.stages.split(",") if s] or [name for name, _ in PLAN]
    unknown = sorted(set(wanted) - {name for name, _ in PLAN})
    if unknown:
        print(f"unknown stage(s) {unknown}; choose from {[name for name, _ in PLAN]}", file=sys.stderr)
        return 2
    name = "results-small" if args.small else "results"
    results_path = args.out / (f"{name}-partial.json" if args.stages else f"{name}.json")
    args.work.mkdir(parents=True, exist_ok=True)
    info = {"machine": machine(), "scale": "small" if args.small else "full", "loadavg_start": os.getloadavg()}
    started = time.perf_counter()
    groups: dict[str, dict[str, Any]] = {}
    for name, cap in PLAN:
        if name not in wanted:
            continue
        left = args.budget - (time.perf_counter() - started) if args.budget > 0 else float("inf")
        cap = (cap / 4 if args.small and not name.startswith("prefect") else cap) * args.cap_factor
        if left < 20:
            groups[name] = {"status": f"skipped: the {args.budget:.0f} s budget of make bench is used up", "records": []}
            continue
        print(f"[{time.perf_counter() - started:6.0f} s] {name} ...", flush=True)
        groups[name] = run_stage(name, args, min(cap, left))
        print(f"         {groups[name]['status']} in {groups[name]['process_wall_s']} s", flush=True)
        if name == "seed_12" and groups[name]["status"] == "ok":
            for copy in ("cycle", "flow", "server"):
                clone(args.work / "ws_12", args.work / f"ws_{copy}")
    total = round(time.perf_counter() - started, 1)
    payload = {**info, "loadavg_end": os.getloadavg(), "total_wall_s": total, "stages": groups,
               "targets": targets(groups, total, args.small, args.budget)}
    args.out.mkdir(parents=True, exist_ok=True)
    results_path.write_text(json.dumps(payload, indent=1, default=str), encoding="utf-8")
    print("\n" + table(groups) + "\n\n" + target_table(payload["targets"]))
    print(f"\ntotal {total} s; load average at start {info['loadavg_start']}, end {payload['loadavg_end']}")
    print(f"results: {results_path}")
    if not args.keep:
        shutil.rmtree(args.work, ignore_errors=True)
    return 1 if any(g.get("status", "").startswith("failed") for g in groups.values()) else 0


if __name__ == "__main__":
    sys.exit(main())
