"""What `dyadcast.totals.aggregate_totals` costs at full scale, and whether a new version draws the same totals.

Three steps, each in its own process so that peak RSS is that of the step alone:

    # 1. dyad forecasts as the monthly cycle makes them (copy of ws_cycle, new month ingested, cycle.prepare,
    #    fit + predict; totals skipped): by default persistence and negative_binomial on all 40,000 dyads,
    #    hurdle_nb on a 10 % dyad sample (--models name:share,...; a sample's file gets a _<share>pct suffix).
    #    One Parquet file per model, and its origin_rho (None for these: only tweedie_gbm and the ensemble
    #    estimate one) in <name>.rho.json, which may be edited by hand, e.g. {"1": 0.12, "2": 0.15, ...}, to
    #    measure a rho per horizon (the draws are sorted once per distinct rho).
    flock /tmp/fullscale.lock .venv/bin/python bench/totals_cost.py build bench/output/work-full /tmp/totals/inputs
    # 2. the cost of one call: the current code, or (--rev) the code of a git revision or a draft file
    flock /tmp/fullscale.lock env OPENBLAS_NUM_THREADS=1 /usr/bin/time -v \
        .venv/bin/python bench/totals_cost.py time /tmp/totals/inputs/persistence.parquet [--rev bd2d015] [--profile]
    # 3. agreement: totals of both versions over several seeds; the differences between the versions against
    #    the differences between seeds of one version (Monte-Carlo error)
    .venv/bin/python bench/totals_cost.py compare /tmp/totals/inputs/persistence.parquet --rev bd2d015 --seeds 8

bd2d015 (like every commit before this change) holds the per-draw inverse-CDF version of dyadcast.totals.
"""

from __future__ import annotations

import argparse
import importlib.util
import json
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path
from types import ModuleType
from typing import Any

import numpy as np
import pandas as pd

REPO = Path(__file__).resolve().parents[1]
LEVELS = (0.05, 0.25, 0.5, 0.75, 0.95)
SEED = 20261201  # the default workspace seed
MODELS = (("persistence", 1.0), ("negative_binomial", 1.0), ("hurdle_nb", 0.1))  # (name, share of the dyads)


def build(work: Path, out: Path, models: tuple[tuple[str, float], ...] = MODELS) -> None:
    """Dyad forecasts of the cycle (fit_and_forecast with aggregate_totals replaced by a recorder)."""
    sys.path.insert(0, str(REPO / "bench"))
    import global_panel as gp
    from stages import drop_into_inbox

    from dyadcast import cycle, totals
    from dyadcast.ingest import ingest_inbox
    from dyadcast.warehouse import open_warehouse
    from dyadcast.workspace import open_workspace

    out.mkdir(parents=True, exist_ok=True)
    captured: dict[str, Any] = {}

    def record(dyads: pd.DataFrame, quantiles: Any, seed: int = 0, rho: Any = None, **_: Any) -> pd.DataFrame:
        captured.update(dyads=dyads, rho=rho)
        return dyads.iloc[0:0].assign(level="origin_total")

    totals.aggregate_totals = record  # cycle._package imports it at call time
    with tempfile.TemporaryDirectory(dir=out) as tmp:
        shutil.copytree(work / "ws_cycle", Path(tmp) / "ws")
        ws = open_workspace(Path(tmp) / "ws")
        config = ws.config()
        cutoff = gp.month_starts(gp.FULL if not work.name.endswith("small") else gp.SMALL)[-1]
        with open_warehouse(ws.warehouse_path) as con:
            drop_into_inbox(sorted((work / "drops" / "month").iterdir()), ws)
            ingest_inbox(ws, con)
            data = cycle.prepare(con.cursor(), config, cutoff, gp.publication(cutoff), progress=print)
    for name, fraction in models:
        part = data if fraction == 1.0 else _sample(data, fraction)
        started = time.process_time()
        cycle.fit_and_forecast(name, part, config)
        dyads, rho = captured["dyads"], captured["rho"]
        stem = name if fraction == 1.0 else f"{name}_{round(fraction * 100)}pct"
        dyads.to_parquet(out / f"{stem}.parquet", index=False)
        (out / f"{stem}.rho.json").write_text(json.dumps(rho), encoding="utf-8")
        print(f"{name}: {len(dyads):,} dyad rows, rho {rho}, fit + predict {time.process_time() - started:.1f} s CPU")


def _sample(data: Any, fraction: float) -> Any:
    """The prepared data restricted to a random share of the dyads (dormant ones included)."""
    from dataclasses import replace

    keys = data.rows[["origin", "destination"]].sample(frac=fraction, random_state=1)

    def keep(frame: pd.DataFrame) -> pd.DataFrame:
        return frame.merge(keys, on=["origin", "destination"]) if len(frame) else frame

    return replace(data, train=keep(data.train), rows=keep(data.rows), active_train=keep(data.active_train),
                   active_rows=keep(data.active_rows), dormant_rows=keep(data.dormant_rows),
                   dormant_forecast=keep(data.dormant_forecast))


def load_module(rev: str | None) -> ModuleType:
    """dyadcast.totals as it is now (rev None), as it was at a git revision, or from a file (a draft)."""
    if rev is None:
        from dyadcast import totals

        return totals
    path = Path(rev)
    if not path.is_file():
        text = subprocess.run(["git", "-C", str(REPO), "show", f"{rev}:src/dyadcast/totals.py"], check=True,
                              capture_output=True, text=True).stdout
        path = Path(tempfile.mkdtemp()) / f"totals_{rev.replace('/', '_')}.py"
        path.write_text(text, encoding="utf-8")
    spec = importlib.util.spec_from_file_location(path.stem, path)
    module = importlib.util.module_from_spec(spec)  # type: ignore[arg-type]
    sys.modules[path.stem] = module  # dataclasses look their module up there
    spec.loader.exec_module(module)  # type: ignore[union-attr]
    return module


def read_input(path: Path) -> tuple[pd.DataFrame, Any]:
    rho_path = path.with_suffix(".rho.json")
    rho = json.loads(rho_path.read_text(encoding="utf-8")) if rho_path.exists() else None
    return pd.read_parquet(path), rho


def time_one(path: Path, rev: str | None, seed: int, profile: bool) -> None:
    module = load_module(rev)
    dyads, rho = read_input(path)
    wall, cpu = time.perf_counter(), time.process_time()
    if profile:
        import cProfile
        import pstats

        prof = cProfile.Profile()
        prof.runcall(module.aggregate_totals, dyads, LEVELS, rho=rho, seed=seed)
        pstats.Stats(prof).sort_stats("tottime").print_stats(15)
    else:
        module.aggregate_totals(dyads, LEVELS, rho=rho, seed=seed)
    print(f"{path.name} ({len(dyads):,} dyad rows) {rev or 'current'}: {time.perf_counter() - wall:.2f} s wall, "
          f"{time.process_time() - cpu:.2f} s CPU")


def compare(path: Path, rev: str, seeds: int, new: str | None = None, rho: float | None = None) -> None:
    """Per total and column: the seed-averaged difference between the versions against the seed-to-seed spread.

    With k seeds per version, z = (mean_new - mean_old) / (sd * sqrt(2 / k)) (sd pooled over both versions)
    follows a t distribution with 2(k - 1) degrees of freedom when both versions draw from the same
    distribution: mean z^2 near (2k - 2) / (2k - 4), mean z near 0, a few |z| > 3 per thousand totals.
    "rel" columns are relative to the old seed mean: the bias, and the Monte-Carlo error of one run (sd).
    """
    from dyadcast.models.base import quantile_column

    dyads, stored_rho = read_input(path)
    rho = stored_rho if rho is None else rho
    cols = [*(quantile_column(q) for q in LEVELS), "p_positive"]
    runs: dict[str, list[np.ndarray]] = {"old": [], "new": []}
    keys = None
    for label, module in (("old", load_module(rev)), ("new", load_module(new))):
        for s in range(seeds):
            tot = module.aggregate_totals(dyads, LEVELS, rho=rho, seed=SEED + s)
            tot = tot.sort_values(["horizon", "level", "origin", "destination"]).reset_index(drop=True)
            names = tot[["horizon", "level", "origin", "destination"]].astype(str)
            if keys is None:
                keys = names
            elif not keys.equals(names):
                raise RuntimeError("the two versions return different total rows")
            runs[label].append(tot[cols].to_numpy(dtype=float))
    old, new_ = np.stack(runs["old"]), np.stack(runs["new"])
    sd = np.sqrt((old.var(axis=0, ddof=1) + new_.var(axis=0, ddof=1)) / 2)
    diff = new_.mean(axis=0) - old.mean(axis=0)
    scale = np.maximum(np.abs(old.mean(axis=0)), 1e-9)
    dof = 2 * seeds - 2
    print(f"{path.name}: {len(keys):,} totals, {seeds} seeds per version, rho {rho}; under no difference "
          f"mean z^2 = {dof / (dof - 2):.2f}")
    print(f"  {'level':17s} {'column':10s} {'n':>5s} {'mean z^2':>8s} {'mean z':>7s} {'|z|>3':>5s} "
          f"{'rel bias':>9s} {'rel sd':>8s}")
    for level in ("world_total", "origin_total", "destination_total"):
        rows = (keys["level"] == level).to_numpy()
        for j, col in enumerate(cols):
            d, s, sc = diff[rows, j], sd[rows, j], scale[rows, j]
            varied = s > 0
            z = d[varied] / (s[varied] * np.sqrt(2 / seeds))
            flat = "" if varied.all() else f"  ({(~varied).sum()} without spread, {(d[~varied] != 0).sum()} differ)"
            print(f"  {level:17s} {col:10s} {rows.sum():5d} {np.mean(z**2) if z.size else 0:8.2f} "
                  f"{np.mean(z) if z.size else 0:+7.2f} {np.sum(np.abs(z) > 3):5d} {np.mean(d / sc):+9.4f} "
                  f"{np.mean(s / sc):8.4f}{flat}")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    sub = parser.add_subparsers(dest="step", required=True)
    b = sub.add_parser("build")
    b.add_argument("work", type=Path)
    b.add_argument("out", type=Path)
    b.add_argument("--models", default=",".join(f"{m}:{f}" for m, f in MODELS),
                   help="name:share,... (default %(default)s)")
    t = sub.add_parser("time")
    t.add_argument("input", type=Path)
    t.add_argument("--rev")
    t.add_argument("--seed", type=int, default=SEED)
    t.add_argument("--profile", action="store_true")
    c = sub.add_parser("compare")
    c.add_argument("input", type=Path)
    c.add_argument("--rev", required=True)
    c.add_argument("--seeds", type=int, default=4)
    c.add_argument("--new", help="the version to check (default: the current src/dyadcast/totals.py)")
    c.add_argument("--rho", type=float, help="one rho for every horizon instead of the stored one")
    args = parser.parse_args()
    if args.step == "build":
        build(args.work, args.out, tuple((m, float(f)) for m, f in (x.split(":") for x in args.models.split(","))))
    elif args.step == "time":
        time_one(args.input, args.rev, args.seed, args.profile)
    else:
        compare(args.input, args.rev, args.seeds, args.new, args.rho)


if __name__ == "__main__":
    main()
