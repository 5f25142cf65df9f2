"""What tweedie_gbm costs per month at full scale, and whether its refresh forecasts as well as a fit.

Needs a kept work folder (`run_bench.py --keep`, or the lead's bench/output/work-full). The frame is the
cycle's (`cycle.prepare` at the newest history month, active dyads), C its newest anchor month; an earlier cutoff P is emulated by hiding what was
unknown at P (anchor rows from P on, targets after P), so one frame serves every cutoff.

Timing (default): "fit" mode at C - 1 (power search, early stopping, a refit per horizon), its boosters saved
as a snapshot saves them, then at C a "continued" refresh from them and a "refitted" refresh (stored power
and rounds, as when no boosters are found); each model fit + predict of the active dyads, in CPU and wall
seconds (totals excluded: they belong to dyadcast.totals).

`--score`: at pseudo-cutoffs P = C - 11, C - 8, C - 5 (the newest for which all six horizons are known), a fit
at P against a fit at P - chain continued month by month up to P, each scored on the known targets (pooled
WIS, Poisson deviance, 50/90 % coverage, sum of means / sum of actuals), plus how far the two means lie apart.

    OPENBLAS_NUM_THREADS=1 .venv/bin/python bench/tweedie_cost.py /work/benchbase/work-full
    OPENBLAS_NUM_THREADS=1 .venv/bin/python bench/tweedie_cost.py WORK --score --sample 0.25 --chain 12
"""

from __future__ import annotations

import argparse
import json
import shutil
import sys
import tempfile
import time
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
from global_panel import FULL, SMALL, month_starts, publication

from dyadcast import cycle
from dyadcast.config import Config
from dyadcast.models.base import known_at
from dyadcast.models.ensemble import wis
from dyadcast.models.tweedie_gbm import ARTIFACTS_KEY, TweedieGBM

LEVELS = (0.05, 0.25, 0.5, 0.75, 0.95)


def prepared(work: Path, config: Config) -> Any:  # noqa: ANN401 - cycle.PreparedData
    cutoff = month_starts(SMALL if work.name.endswith("small") else FULL)[-2]
    with tempfile.TemporaryDirectory() as tmp:
        copy = Path(tmp) / "warehouse.duckdb"
        shutil.copy(work / "ws_base" / "warehouse.duckdb", copy)  # never hold the kept workspace's lock
        from dyadcast.warehouse import open_warehouse

        with open_warehouse(copy) as con:
            return cycle.prepare(con.cursor(), config, cutoff, publication(cutoff), progress=print)


def at_cutoff(frame: pd.DataFrame, cutoff: pd.Timestamp, horizon: int) -> tuple[pd.DataFrame, pd.DataFrame]:
    """(training rows, rows to forecast) as a cycle at `cutoff` would see them (revisions aside)."""
    past = known_at(frame, cutoff, horizon)
    return past[pd.to_datetime(past["month"]) < cutoff], frame[pd.to_datetime(frame["month"]) == cutoff]


def timed(label: str, run) -> tuple[Any, dict[str, float]]:  # noqa: ANN001 - a callable
    wall, cpu = time.perf_counter(), time.process_time()
    out = run()
    spent = {"cpu_s": round(time.process_time() - cpu, 2), "wall_s": round(time.perf_counter() - wall, 2)}
    print(f"{label}: {spent['cpu_s']} s CPU, {spent['wall_s']} s wall", flush=True)
    return out, spent


def stored_state(model: TweedieGBM, folder: Path) -> dict[str, Any]:
    """The state a snapshot stores, plus the artifacts folder a refresh is given (see the cycle's options)."""
    model.save_artifacts(folder)
    return {**json.loads(json.dumps(model.fitted_state())), ARTIFACTS_KEY: str(folder)}


def cost(frame: pd.DataFrame, rows_at: pd.Timestamp, config: Config, tmp: Path,
         options: dict[str, Any]) -> dict[str, Any]:
    make = {"horizon": config.horizon, "quantiles": config.quantiles, "seed": config.seed, **options}
    before, _ = at_cutoff(frame, rows_at - pd.DateOffset(months=1), config.horizon)
    now, rows = at_cutoff(frame, rows_at, config.horizon)
    print(f"active training rows: {len(before):,} at C - 1, {len(now):,} at C; {len(rows):,} dyads to forecast")
    out: dict[str, Any] = {}
    fit, out["fit"] = timed("fit mode at C - 1 (fit + predict)", lambda: _fit_predict(TweedieGBM(**make), before,
                                                                                        rows))
    state = stored_state(fit, tmp / "previous")
    for label, params in (("continued", state), ("refitted", {k: v for k, v in state.items() if k != ARTIFACTS_KEY})):
        model, out[label] = timed(f"refresh at C, {label} (fit + predict)", lambda p=params: _fit_predict(
            TweedieGBM(**make, tune=False, params=p), now, rows))
        assert model.refresh_method_ == label, model.refresh_note_
    out["fit_state"] = {k: fit.fitted_state()[k] for k in ("power", "rounds", "alpha", "zero_rows_kept_share")}
    return out


def _fit_predict(model: TweedieGBM, train: pd.DataFrame, rows: pd.DataFrame) -> TweedieGBM:
    model.fit(train).predict(rows)
    return model


def score(forecast: pd.DataFrame, rows: pd.DataFrame, horizon: int) -> dict[str, float]:
    parts = []
    for h in range(1, horizon + 1):
        truth = rows[["origin", "destination", f"target_{h}"]].rename(columns={f"target_{h}": "y"})
        parts.append(forecast[forecast["horizon"] == h].merge(truth, on=["origin", "destination"]))
    j = pd.concat(parts).dropna(subset=["y"])
    y, mu = j["y"].to_numpy(float), np.maximum(j["mean"].to_numpy(float), 1e-9)
    q = j[["q050", "q250", "q500", "q750", "q950"]].to_numpy(float)
    deviance = 2 * (np.where(y > 0, y * np.log(np.where(y > 0, y, 1) / mu), 0) - y + mu)
    return {"wis": float(wis(y, q, LEVELS).mean()), "poisson_deviance": float(deviance.mean()),
            "cov90": float(((y >= q[:, 0]) & (y <= q[:, 4])).mean()),
            "cov50": float(((y >= q[:, 1]) & (y <= q[:, 3])).mean()), "mean_over_actual": float(mu.sum() / y.sum())}


def accuracy(frame: pd.DataFrame, config: Config, chain: int, tmp: Path, sample: float,
             options: dict[str, Any]) -> dict[str, Any]:
    newest = pd.to_datetime(frame["month"]).max()
    # on a dyad sample, keep the share of zero rows the full frame keeps
    make = {"horizon": config.horizon, "quantiles": config.quantiles, "seed": config.seed,
            "max_zero_rows": round(TweedieGBM().max_zero_rows * sample), **options}
    out: dict[str, list[dict[str, float]]] = {"fit": [], "continued": []}
    for back in (11, 8, 5):
        pseudo = newest - pd.DateOffset(months=back)
        past, rows = at_cutoff(frame, pseudo, config.horizon)
        fitted = TweedieGBM(**make).fit(past).predict(rows)
        start = pseudo - pd.DateOffset(months=chain)
        model = TweedieGBM(**make).fit(at_cutoff(frame, start, config.horizon)[0])
        for step in range(1, chain + 1):
            state = stored_state(model, tmp / f"{back}-{step}")
            train, _ = at_cutoff(frame, start + pd.DateOffset(months=step), config.horizon)
            model = TweedieGBM(**make, tune=False, params=state).fit(train)
            assert model.refresh_method_ == "continued", model.refresh_note_
        continued = model.predict(rows)
        pair = fitted.merge(continued, on=["origin", "destination", "horizon"], suffixes=("_fit", "_cont"))
        gap = np.abs(np.log((pair["mean_cont"] + 0.1) / (pair["mean_fit"] + 0.1)))
        for label, forecast in (("fit", fitted), ("continued", continued)):
            out[label].append(score(forecast, rows, config.horizon))
        print(f"P = C - {back}: fit {out['fit'][-1]}\n  continued x{chain} {out['continued'][-1]}\n"
              f"  |log (mean + 0.1) ratio| median {np.median(gap):.3f}, 90 % {np.quantile(gap, 0.9):.3f}", flush=True)
    pooled = {label: {k: round(float(np.mean([r[k] for r in rs])), 4) for k in rs[0]} for label, rs in out.items()}
    print(f"pooled over the three pseudo-cutoffs: {pooled}")
    return pooled


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("work", type=Path, nargs="?", default=Path(__file__).parent / "output" / "work-full")
    parser.add_argument("--sample", type=float, default=1.0, help="share of the active dyads (seeded)")
    parser.add_argument("--score", action="store_true", help="accuracy of continued refreshes against fits")
    parser.add_argument("--chain", type=int, default=12, help="--score: continued months before each cutoff")
    parser.add_argument("--options", type=json.loads, default={}, help="TweedieGBM options (JSON), e.g. "
                        '{"refresh_rounds": 5}')
    parser.add_argument("--json", type=Path, default=None, help="also write the figures here")
    args = parser.parse_args(argv)
    config = Config(models=("persistence", "tweedie_gbm"), primary_model="tweedie_gbm")
    frame = prepared(args.work, config).active_train
    if args.sample < 1:
        dyads = frame[["origin", "destination"]].drop_duplicates().sample(frac=args.sample, random_state=1)
        frame = frame.merge(dyads, on=["origin", "destination"])
    newest = pd.to_datetime(frame["month"]).max()
    with tempfile.TemporaryDirectory(prefix="tweedie_cost_") as tmp:
        result = (accuracy(frame, config, args.chain, Path(tmp), args.sample, args.options) if args.score
                  else cost(frame, newest, config, Path(tmp), args.options))
    if args.json:
        args.json.write_text(json.dumps(result, indent=1, default=str), encoding="utf-8")
    return 0


if __name__ == "__main__":
    sys.exit(main())
