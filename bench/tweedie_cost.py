"""What tweedie_gbm costs per month at full scale, without waiting for a full fit (about 10 min here).

Needs a kept full-scale work folder (`run_bench.py --keep`). Prints the CPU time of 50 boosting rounds on all
active rows of horizon 1 (one thread, two threads, 80 % of the zero rows dropped with weights), then the
default fit and a "refresh" fit (stored power and rounds) on a 10 % dyad sample; cost is close to linear in
rows, so x10 estimates the full fit.

    OPENBLAS_NUM_THREADS=1 .venv/bin/python bench/tweedie_cost.py bench/output/work-full   # or work-small
"""

from __future__ import annotations

import shutil
import sys
import tempfile
import time
from pathlib import Path

import lightgbm as lgb
import numpy as np
import pandas as pd
from global_panel import FULL, SMALL, month_starts, publication

from dyadcast import cycle
from dyadcast.config import Config
from dyadcast.models.design import horizon_rows
from dyadcast.models.tweedie_gbm import TweedieGBM
from dyadcast.warehouse import open_warehouse


def clock() -> tuple[float, float]:
    return time.perf_counter(), time.process_time()


def since(start: tuple[float, float]) -> str:
    return f"{time.perf_counter() - start[0]:.1f} s wall, {time.process_time() - start[1]:.1f} s CPU"


def main(work: Path) -> None:
    config = Config(models=("persistence", "tweedie_gbm"), primary_model="tweedie_gbm")
    cutoff = month_starts(SMALL if work.name.endswith("small") else FULL)[-2]
    with tempfile.TemporaryDirectory() as tmp:
        copy = Path(tmp) / "warehouse.duckdb"
        shutil.copy(work / "ws_base" / "warehouse.duckdb", copy)  # never hold the kept workspace's lock
        with open_warehouse(copy) as con:
            data = cycle.prepare(con.cursor(), config, cutoff, publication(cutoff), progress=print)
    train = data.active_train
    probe = TweedieGBM(horizon=config.horizon, seed=1)
    probe.numeric_ = [c for c in train.columns if c not in {"origin", "destination", "month", "calendar_month"}
                      and not c.startswith("target_") and pd.api.types.is_numeric_dtype(train[c])]
    probe.categories_ = {c: sorted(train[c].astype(str).unique()) for c in ("origin", "destination")}
    probe.feature_names_ = [*probe.numeric_, "target_calendar_month", "origin", "destination"]
    rows = horizon_rows(train, 1)
    x, y = probe._design(rows, 1), rows["target_1"].to_numpy(dtype=float)
    print(f"horizon 1: {len(y):,} active rows, {np.mean(y == 0):.1%} zero targets")
    for label, threads, keep in (("1 thread", 1, None), ("2 threads", 2, None), ("1 thread, 20 % of zeros", 1, 0.2)):
        probe.num_threads = threads
        pick = np.ones(len(y), bool) if keep is None else (y > 0) | (np.random.default_rng(0).random(len(y)) < keep)
        weight = None if keep is None else np.where(y[pick] > 0, 1.0, 1 / keep)
        start = clock()
        dataset = lgb.Dataset(x[pick], y[pick], weight=weight, feature_name=probe.feature_names_,
                              categorical_feature=["origin", "destination"])
        lgb.train(probe._lgb_params(1.3), dataset, num_boost_round=50)
        print(f"  50 rounds, {label} ({int(pick.sum()):,} rows): {since(start)}")
    dyads = train[["origin", "destination"]].drop_duplicates().sample(frac=0.1, random_state=1)
    sample = train.merge(dyads, on=["origin", "destination"])
    state = None
    for mode in ("fit", "refresh"):
        model = (TweedieGBM(horizon=config.horizon, seed=1) if state is None
                 else TweedieGBM(horizon=config.horizon, seed=1, tune=False, params=state))
        start, cpu = clock(), time.process_time()
        model.fit(sample)
        state = model.fitted_state()
        rounds = {h: s["rounds"] for h, s in model.state_.items()}
        print(f"{mode} on 10 % of the active dyads ({len(sample):,} rows): {since(start)}; rounds {rounds}; "
              f"full-scale estimate {10 * (time.process_time() - cpu):.0f} s CPU")


if __name__ == "__main__":
    main(Path(sys.argv[1]) if len(sys.argv) > 1 else Path(__file__).parent / "output" / "work-full")
