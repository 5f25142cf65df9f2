"""Time every model of the demo on the frame one monthly cycle builds, in "fit" and in "refresh" mode.

The frame is the cycle's own: the invented demo scenario (seed 7), history dropped up to 2024-12, ingested,
then `dyadcast.cycle.prepare` at cutoff 2024-12 as of 2025-01-10 (356 dyads, H = 6). Each model runs through
`dyadcast.cycle.fit_and_forecast` exactly as the flow runs it (fit on active dyads, dormant forecaster, totals):
* fit:     the options `cycle.model_options` gives in "fit" mode ({"tune": True} where accepted);
* refresh: {"tune": False, "params": <the fit run's fitted_state(), round-tripped through JSON as the
           snapshot metadata stores it>} where accepted, else the same call again;
* refresh-prev: the same, with the state of a fit at the previous month (cutoff 2024-11 as of 2024-12-10):
           what a monthly cycle really starts from (one more month of data, revised figures).
Models that continue from their saved files (tweedie_gbm) also get the folder of the files the run before
saved (`params["artifacts_dir"]`, what the cycle hands over after a snapshot).
CPU seconds (`time.process_time`, this process, all threads) and wall seconds are reported per model, with the
warnings each run raised. Libraries are imported before timing (their import cost is reported separately):
the cycle pays it once per process, not per model.

    OPENBLAS_NUM_THREADS=1 .venv/bin/python bench/models_demo.py            # all 10 models, both modes
    .venv/bin/python bench/models_demo.py --models zinb,hurdle_nb --modes refresh --profile
"""

from __future__ import annotations

import os

os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")  # before numpy loads (models.md: 2-4x faster on this box)
os.environ.setdefault("OMP_NUM_THREADS", "1")

import argparse  # noqa: E402
import cProfile  # noqa: E402
import inspect  # noqa: E402
import io  # noqa: E402
import json  # noqa: E402
import pickle  # noqa: E402
import pstats  # noqa: E402
import shutil  # noqa: E402
import sys  # noqa: E402
import tempfile  # noqa: E402
import time  # noqa: E402
import warnings  # noqa: E402
from collections import Counter  # noqa: E402
from datetime import date  # noqa: E402
from pathlib import Path  # noqa: E402
from typing import Any  # noqa: E402

REPO = Path(__file__).resolve().parents[1]
OUT = REPO / "bench" / "output" / "models_demo"
MODELS = ("persistence", "seasonal_persistence", "rolling_mean", "poisson_glm", "ppml_gravity",
          "negative_binomial", "zinb", "hurdle_nb", "tweedie_gbm", "ensemble")
CUTOFF, AS_OF, HISTORY_END = date(2024, 12, 1), date(2025, 1, 10), "2024-12"
PREVIOUS_CUTOFF, PREVIOUS_AS_OF = date(2024, 11, 1), date(2024, 12, 10)


def workspace_config():  # noqa: ANN201 - dyadcast.config.Config
    """The configuration a new workspace gets (what the demo uses apart from its model list)."""
    from dyadcast.workspace import init_workspace

    root = Path(tempfile.mkdtemp(prefix="models_demo_cfg_"))
    try:
        return init_workspace(root / "ws").config()
    finally:
        shutil.rmtree(root, ignore_errors=True)


def build_prepared(rebuild: bool = False, previous: bool = False):  # noqa: ANN201 - (PreparedData, Config)
    """The cycle's PreparedData for the demo frame (or, `previous`, the month before: cutoff 2024-11 as of
    2024-12-10); cached as pickles because ingest takes ~a minute."""
    from dyadcast import cycle

    cache = OUT / ("prepared_previous.pkl" if previous else "prepared.pkl")
    if cache.exists() and not rebuild:
        with cache.open("rb") as fh:
            return pickle.load(fh), workspace_config()
    from dyadcast.demo.drops import write_history_drop
    from dyadcast.demo.scenario import generate_scenario
    from dyadcast.ingest import ingest_inbox
    from dyadcast.warehouse import open_warehouse
    from dyadcast.workspace import init_workspace

    root = Path(tempfile.mkdtemp(prefix="models_demo_"))
    try:
        ws = init_workspace(root / "ws")
        write_history_drop(generate_scenario(seed=7), HISTORY_END, ws.inbox)
        config = ws.config()
        with open_warehouse(ws.warehouse_path) as con:
            ingest_inbox(ws, con, progress=lambda _m: None)
            data = cycle.prepare(con, config, cutoff=CUTOFF, as_of=AS_OF, progress=print)
            before = cycle.prepare(con, config, cutoff=PREVIOUS_CUTOFF, as_of=PREVIOUS_AS_OF, progress=print)
    finally:
        shutil.rmtree(root, ignore_errors=True)
    OUT.mkdir(parents=True, exist_ok=True)
    for path, value in ((OUT / "prepared.pkl", data), (OUT / "prepared_previous.pkl", before)):
        with path.open("wb") as fh:
            pickle.dump(value, fh)
    return (before if previous else data), config


def takes_state(name: str) -> bool:
    from dyadcast.models.registry import model_class

    return {"tune", "params"} <= set(inspect.signature(model_class(name).__init__).parameters)


def import_libraries() -> float:
    """Import what the models use, so the first model timed does not pay for everyone's imports."""
    started = time.process_time()
    import lightgbm  # noqa: F401
    import pyfixest as pf
    import statsmodels.api  # noqa: F401
    import statsmodels.discrete.count_model  # noqa: F401
    import statsmodels.discrete.truncated_model  # noqa: F401

    _ = pf.fepois  # pyfixest resolves its heavy imports on first attribute access (models.md §1)
    from dyadcast.models.registry import MODELS as REGISTERED
    from dyadcast.models.registry import model_class

    for name in REGISTERED:
        model_class(name)
    return time.process_time() - started


def run_once(name: str, data, config, options: dict[str, Any], profile: bool) -> dict[str, Any]:  # noqa: ANN001
    from dyadcast import cycle

    profiler = cProfile.Profile() if profile else None
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        cpu, wall = time.process_time(), time.perf_counter()
        if profiler:
            profiler.enable()
        result = cycle.fit_and_forecast(name, data, config, options)
        if profiler:
            profiler.disable()
        cpu, wall = time.process_time() - cpu, time.perf_counter() - wall
    timings = result.metadata["timings"]
    state = with_model_files(result.fitted, json.loads(json.dumps(result.metadata["fitted_state"], default=str)))
    out = {"cpu_s": round(cpu, 2), "wall_s": round(wall, 2), "fit_wall_s": round(timings["fit_s"], 2),
           "predict_wall_s": round(timings["predict_s"], 2), "totals_wall_s": round(timings["totals_s"], 2),
           "warnings": dict(Counter(w.category.__name__ for w in caught)),
           "warning_text": sorted({str(w.message)[:160] for w in caught})[:5], "state": state}
    if profiler:
        stream = io.StringIO()
        pstats.Stats(profiler, stream=stream).sort_stats("cumulative").print_stats(35)
        out["profile"] = stream.getvalue()
    return out


def with_model_files(model: Any, state: dict[str, Any]) -> dict[str, Any]:
    """The stored state plus the folder of the model's saved files, as a refresh after a snapshot gets them
    (`params["artifacts_dir"]`; tweedie_gbm continues its boosters from there)."""
    if not state or "refresh_method" not in state:  # only models that continue from their files
        return state
    folder = Path(tempfile.mkdtemp(prefix="models_demo_files_"))
    model.save_artifacts(folder)
    return {**state, "artifacts_dir": str(folder)}


def _at(frame, pseudo, horizon: int):  # noqa: ANN001, ANN202 - (training frame, rows at the pseudo-cutoff)
    import pandas as pd

    from dyadcast.models.base import known_at

    past = known_at(frame, pseudo, horizon)
    return past[pd.to_datetime(past["month"]) < pseudo], frame[pd.to_datetime(frame["month"]) == pseudo]


def score_models(data, config, names: list[str], backs: tuple[int, ...] = (6, 9, 12)  # noqa: ANN001
                 ) -> dict[str, dict[str, float]]:
    """Honesty check: at pseudo-cutoffs P = C - back, fit on anchors before P (targets after P hidden),
    forecast from P and score against the targets the frame already knows (active dyads), pooled over P.

    Models that continue from last month's files (tweedie_gbm) are also scored as a monthly refresh makes
    them: fitted at P - 1, then refreshed at P from that state and its files ("<name>/refresh").
    """
    import numpy as np
    import pandas as pd

    from dyadcast.models.ensemble import wis
    from dyadcast.models.registry import make_model

    frame = data.active_train
    months = pd.to_datetime(frame["month"])
    splits = []
    for back in backs:
        pseudo = months.max() - pd.DateOffset(months=back - 1)
        splits.append((*_at(frame, pseudo, config.horizon), _at(frame, pseudo - pd.DateOffset(months=1),
                                                               config.horizon)[0]))
    levels = sorted(config.quantiles)
    out = {}
    for name in [n for m in names for n in (m, f"{m}/refresh")]:
        base, refresh = name.removesuffix("/refresh"), name.endswith("/refresh")
        if refresh and not takes_state(base):
            continue
        cpu, parts = time.process_time(), []
        for past, rows, before in splits:
            make = {"horizon": config.horizon, "quantiles": config.quantiles, "seed": config.seed}
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                if refresh:
                    previous = make_model(base, **make).fit(before)
                    state = with_model_files(previous, json.loads(json.dumps(previous.fitted_state(), default=str)))
                    if "artifacts_dir" not in state:
                        break  # a model without files to continue: its refresh is its fit, already scored
                    model = make_model(base, **make, tune=False, params=state)
                else:
                    model = make_model(base, **make)
                forecast = model.fit(past).predict(rows)
            for h in range(1, config.horizon + 1):
                truth = rows[["origin", "destination", f"target_{h}"]].rename(columns={f"target_{h}": "y"})
                parts.append(forecast[forecast["horizon"] == h].merge(truth, on=["origin", "destination"]))
        if not parts:
            continue
        cpu = time.process_time() - cpu
        j = pd.concat(parts).dropna(subset=["y"])
        y = j["y"].to_numpy(dtype=float)
        q = j[[f"q{round(x * 1000):03d}" for x in levels]].to_numpy(dtype=float)
        out[name] = {"rows": len(j), "mean_wis": float(wis(y, q, levels).mean()),
                     "cov50": float(((y >= j["q250"]) & (y <= j["q750"])).mean()),
                     "cov90": float(((y >= j["q050"]) & (y <= j["q950"])).mean()),
                     "mae": float(np.abs(y - j["mean"]).mean()),
                     "p_positive_mean": float(j["p_positive"].mean()), "observed_positive": float((y > 0).mean()),
                     "fit_predict_cpu_s": round(cpu, 2)}
        r = out[name]
        print(f"{name:<22} WIS {r['mean_wis']:9.2f}  cov50 {r['cov50']:.3f}  cov90 {r['cov90']:.3f}  "
              f"MAE {r['mae']:8.2f}  P(>0) {r['p_positive_mean']:.3f} vs {r['observed_positive']:.3f}  "
              f"({r['rows']} rows, {cpu:.1f} s CPU)", flush=True)
    return out


def time_ensemble_reusing_members(data, previous, config) -> dict[str, float]:  # noqa: ANN001
    """The ensemble as the cycle could run it: members already fitted this cycle (refresh mode) are handed
    over with `Ensemble.use_fitted_members`, last month's state gives the weights. Times only the ensemble."""
    from dyadcast.models.ensemble import Ensemble
    from dyadcast.models.registry import make_model
    from dyadcast.totals import aggregate_totals

    def refreshed(name: str, frame) -> Any:  # noqa: ANN001
        state = json.loads(json.dumps(make_model(name, config.horizon, config.quantiles, config.seed)
                                      .fit(frame.active_train).fitted_state(), default=str))
        return make_model(name, config.horizon, config.quantiles, config.seed, tune=False, params=state)

    template = Ensemble(config.horizon, config.quantiles, config.seed)
    last_month = json.loads(json.dumps(Ensemble(config.horizon, config.quantiles, config.seed)
                                       .fit(previous.active_train).fitted_state(), default=str))
    members = {m: refreshed(m, previous).fit(data.active_train) for m in template.members}
    cpu, wall = time.process_time(), time.perf_counter()
    model = Ensemble(config.horizon, config.quantiles, config.seed, tune=False, params=last_month)
    dyads = model.use_fitted_members(members).fit(data.active_train).predict(data.active_rows)
    aggregate_totals(dyads, config.quantiles, seed=config.seed, rho=model.fitted_state()["origin_rho"])
    return {"cpu_s": round(time.process_time() - cpu, 2), "wall_s": round(time.perf_counter() - wall, 2)}


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--models", default=",".join(MODELS))
    parser.add_argument("--modes", default="fit,refresh,refresh-prev",
                        help="fit; refresh (state of the fit run on this frame, as the task defines it); "
                             "refresh-prev (state of a fit at the previous month, as a real monthly cycle has)")
    parser.add_argument("--rebuild", action="store_true", help="rebuild the cached prepared frame")
    parser.add_argument("--profile", action="store_true", help="print the top of a cProfile per run")
    parser.add_argument("--json", type=Path, default=OUT / "results.json")
    parser.add_argument("--reuse", action="store_true",
                        help="also time the ensemble with members handed over (needs the ensemble API)")
    parser.add_argument("--score", action="store_true",
                        help="instead of timing: fit at pseudo-cutoffs 6, 9 and 12 months back and score them")
    args = parser.parse_args(argv)
    names = [m.strip() for m in args.models.split(",") if m.strip()]
    modes = [m.strip() for m in args.modes.split(",") if m.strip()]

    cpu, wall = time.process_time(), time.perf_counter()
    data, config = build_prepared(args.rebuild)
    print(f"frame: {len(data.train):,} training rows ({len(data.active_train):,} active), {len(data.rows)} dyads "
          f"({len(data.dormant_rows)} dormant), H = {config.horizon}; prepared in "
          f"{time.process_time() - cpu:.1f} s CPU / {time.perf_counter() - wall:.1f} s wall")
    print(f"library imports: {import_libraries():.1f} s CPU (paid once per process, not counted below)")
    print(f"OPENBLAS_NUM_THREADS={os.environ.get('OPENBLAS_NUM_THREADS')}")
    if args.score:
        scores = score_models(data, config, [n for n in names if n != "ensemble"] + (
            ["ensemble"] if "ensemble" in names else []))
        args.json.parent.mkdir(parents=True, exist_ok=True)
        args.json.write_text(json.dumps(scores, indent=2), encoding="utf-8")
        print(f"wrote {args.json}")
        return 0
    results: dict[str, dict[str, Any]] = {}
    previous = None
    header = f"{'model':<22}{'mode':<9}{'cpu s':>8}{'wall s':>8}{'fit':>7}{'pred':>7}{'tot':>6}  warnings"
    print(header)
    for name in names:
        results[name] = {}
        fit_state: dict[str, Any] | None = None
        for mode in modes:
            if mode == "fit":
                options = {"tune": True} if takes_state(name) else {}
            elif mode == "refresh":
                if fit_state is None:  # refresh alone: the stored state comes from a fit run first
                    fit_state = run_once(name, data, config, {"tune": True} if takes_state(name) else {},
                                         False)["state"]
                options = {"tune": False, "params": fit_state} if takes_state(name) and fit_state else {}
            elif mode == "refresh-prev":
                if previous is None:
                    previous = build_prepared(args.rebuild, previous=True)[0]
                state = run_once(name, previous, config, {"tune": True} if takes_state(name) else {},
                                 False)["state"]
                options = {"tune": False, "params": state} if takes_state(name) and state else {}
            else:
                parser.error(f"--modes: unknown mode {mode!r}; use fit and/or refresh")
            row = run_once(name, data, config, options, args.profile)
            if mode == "fit":
                fit_state = row["state"]
            results[name][mode] = {k: v for k, v in row.items() if k != "state"}
            print(f"{name:<22}{mode:<9}{row['cpu_s']:8.2f}{row['wall_s']:8.2f}{row['fit_wall_s']:7.2f}"
                  f"{row['predict_wall_s']:7.2f}{row['totals_wall_s']:6.2f}  {row['warnings'] or '-'}", flush=True)
            for text in row["warning_text"]:
                print(f"{'':<31}  ! {text}")
            if args.profile:
                print(row["profile"])
    for mode in modes:
        total = sum(r[mode]["cpu_s"] for r in results.values() if mode in r)
        print(f"total {mode}: {total:.1f} s CPU over {len(results)} models")
    if "ensemble" in names and args.reuse:
        previous = previous if previous is not None else build_prepared(args.rebuild, previous=True)[0]
        reuse = time_ensemble_reusing_members(data, previous, config)
        results.setdefault("ensemble", {})["refresh-prev, members reused"] = reuse
        print(f"ensemble with this cycle's members handed over (Ensemble.use_fitted_members): "
              f"{reuse['cpu_s']:.2f} s CPU, {reuse['wall_s']:.2f} s wall (fit + predict + totals)")
    args.json.parent.mkdir(parents=True, exist_ok=True)
    args.json.write_text(json.dumps({"models": {m: {k: {kk: vv for kk, vv in v.items() if kk != "profile"}
                                                    for k, v in r.items()} for m, r in results.items()},
                                     "openblas_threads": os.environ.get("OPENBLAS_NUM_THREADS"),
                                     "load_average": os.getloadavg()}, indent=2), encoding="utf-8")
    print(f"wrote {args.json}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
