"""A small invented warehouse for the report and analyst-SQL tests: raw flows with a revision, loads, a
rejected file, forecast runs of three models (with a rerun and a backtest) and their accuracy rows.

All data is invented; codes come from the ISO 3166-1 user-assigned ranges (QMA…, XAA…). Accuracy rows
are inserted directly (not through the scoring step), with simple textbook formulas, so these tests do
not depend on the scoring code. The pandas frames kept on `Fixture` are the independent source of the
expected results.
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import date, datetime, timedelta

import duckdb
import numpy as np
import pandas as pd

from dyadcast.months import add_months, month_range
from dyadcast.warehouse import apply_sql

ORIGINS = ("QMA", "QMB", "QMC")
DESTINATIONS = ("XAA", "XAB", "XAC", "XAD")
FIRST_MONTH, LAST_MONTH = date(2023, 1, 1), date(2025, 3, 1)
CUTOFFS = month_range(date(2023, 12, 1), date(2025, 3, 1))  # 16 monthly cutoffs, 15 of them scored
HORIZON = 3
MODELS = ("persistence", "poisson_glm", "tweedie_gbm")
REVISED = [(date(2024, 12, 1), "XAA"), (date(2025, 1, 1), "XAA")]  # (month, destination) revised later
Z = {"q050": -1.645, "q250": -0.674, "q500": 0.0, "q750": 0.674, "q950": 1.645}
QCOLS = list(Z)


def publication(month: date) -> date:
    """Month M is first published on the 10th of M+1 (the revision on the 10th of M+2)."""
    return add_months(month, 1) + timedelta(days=9)


@dataclass
class Fixture:
    path: str
    first_release: pd.DataFrame  # origin, destination, month, arrivals
    latest: pd.DataFrame
    forecasts: pd.DataFrame  # every forecast row with run facts
    runs: pd.DataFrame
    accuracy: pd.DataFrame  # every accuracy row inserted
    big_destination: str


def _truth(rng: np.random.Generator, destinations: tuple[str, ...]) -> tuple[pd.DataFrame, pd.DataFrame]:
    months = month_range(FIRST_MONTH, LAST_MONTH)
    base = {(o, d): rng.uniform(2, 40) for o in ORIGINS for d in destinations}
    base[("QMB", destinations[-1])] = 400.0  # the largest flow goes to the last one, so the report shows its label
    base[("QMC", destinations[1])] = 0.3  # a dyad that is mostly zero
    rows = []
    for (o, d), rate in base.items():
        for k, m in enumerate(months):
            lam = rate * (1 + 0.3 * np.sin(2 * np.pi * m.month / 12)) * (1 + 0.02 * k)
            rows.append((o, d, m, int(rng.poisson(lam))))
    first = pd.DataFrame(rows, columns=["origin", "destination", "month", "arrivals"])
    latest = first.copy()
    for month, dest in REVISED:
        mask = (latest["month"] == month) & (latest["destination"] == dest)
        latest.loc[mask, "arrivals"] = (latest.loc[mask, "arrivals"] * 1.25 + 3).round().astype(int)
    return first, latest


def _insert_raw(con: duckdb.DuckDBPyConnection, first: pd.DataFrame, latest: pd.DataFrame, xss: bool) -> None:
    loads, raw = [], []
    for load_id, month in enumerate(month_range(FIRST_MONTH, LAST_MONTH), start=1):
        part = first[first["month"] == month]
        pub = publication(month)
        loads.append((load_id, f"flows_{pub}.csv", "flows", f"sha-{load_id}", pub, datetime(2025, 4, 1, 8, 0),
                      len(part), f"{load_id}_flows_{pub}.csv"))
        raw.append(part.assign(load_id=load_id, published_on=pub))
    next_id = len(loads) + 1
    for month, dest in REVISED:
        part = latest[(latest["month"] == month) & (latest["destination"] == dest)]
        pub = publication(add_months(month, 1))
        loads.append((next_id, f"flows_revision_{pub}.csv", "flows", f"sha-{next_id}", pub,
                      datetime(2025, 4, 1, 8, 5), len(part), None))
        raw.append(part.assign(load_id=next_id, published_on=pub))
        next_id += 1
    flows = pd.concat(raw, ignore_index=True)
    con.register("_flows", flows)
    con.execute("INSERT INTO raw_flows SELECT load_id, published_on, origin, destination, month, arrivals FROM _flows")
    con.unregister("_flows")
    con.executemany("INSERT INTO loads VALUES (?, ?, ?, ?, ?, ?, ?, ?)", loads)
    extra = [
        (next_id, "origin_indicators_2025-04-10.csv", "origin_indicators", date(2025, 4, 10), 3),
        (next_id + 1, "destination_indicators_2025-03-10.csv", "destination_indicators", date(2025, 3, 10), 4),
        (next_id + 2, "signals_2025-04-02.csv", "signals", date(2025, 4, 2), 3),
    ]
    for load_id, name, kind, pub, n in extra:
        con.execute("INSERT INTO loads VALUES (?, ?, ?, ?, ?, ?, ?, ?)",
                    [load_id, name, kind, f"sha-{load_id}", pub, datetime(2025, 4, 11, 9, 0), n, name])
    for o in ORIGINS:
        con.execute("INSERT INTO raw_origin_indicators VALUES (?, ?, ?, ?, 'conflict_events', 4.0)",
                    [next_id, date(2025, 4, 10), o, date(2025, 3, 1)])
    for d in sorted(set(first["destination"])):
        con.execute("INSERT INTO raw_destination_indicators VALUES (?, ?, ?, ?, 'recognition_rate', 0.4)",
                    [next_id + 1, date(2025, 3, 10), d, date(2025, 2, 1)])
    for o in ORIGINS:
        con.execute("INSERT INTO raw_signals VALUES (?, ?, ?, ?, 'search_intensity', 55.0)",
                    [next_id + 2, date(2025, 4, 2), o, date(2025, 3, 31)])
    bad = "<img src=x onerror=alert(2)>" if xss else "arivals"
    con.execute(
        "INSERT INTO rejected_files VALUES (?, 'flows', 'sha-bad', ?, ?, ?)",
        ["flows_2025-04-10.csv", datetime(2025, 4, 11, 9, 1),
         f"column '{bad}' is not expected; did you mean 'arrivals'?", "quarantine/flows_2025-04-10.csv.rejected.txt"],
    )


def _runs() -> pd.DataFrame:
    runs = []
    for k, cutoff in enumerate(CUTOFFS):
        created = datetime(2025, 4, 1, 9, 0) + timedelta(hours=k)
        for m, model in enumerate(MODELS):
            runs.append((f"{cutoff:%Y%m}-{model}-a", cutoff, model, "monthly", publication(cutoff),
                         created + timedelta(minutes=m)))
    # a rerun of poisson_glm at 2025-01 (newer, so it counts) and a backtest at 2024-06 (the monthly run counts)
    runs.append(("202501-poisson_glm-b", date(2025, 1, 1), "poisson_glm", "monthly", publication(date(2025, 1, 1)),
                 datetime(2025, 4, 2, 12, 0)))
    runs.append(("202406-poisson_glm-bt", date(2024, 6, 1), "poisson_glm", "backtest", publication(date(2024, 6, 1)),
                 datetime(2025, 4, 3, 12, 0)))
    return pd.DataFrame(runs, columns=["run_id", "cutoff", "model", "run_kind", "as_of", "created_at"])


def _dyad_forecasts(runs: pd.DataFrame, first: pd.DataFrame, latest: pd.DataFrame, rng: np.random.Generator,
                    destinations: tuple[str, ...]) -> pd.DataFrame:
    """Persistence: last first-release figure; poisson_glm: near the truth with fair ranges; tweedie_gbm:
    biased low with ranges that are too narrow (so coverage and skill differ between models)."""
    level = latest.set_index(["origin", "destination", "month"])["arrivals"]
    last = first.set_index(["origin", "destination", "month"])["arrivals"]
    rows = []
    for run in runs.itertuples():
        for o in ORIGINS:
            for d in destinations:
                for h in range(1, HORIZON + 1):
                    target = add_months(run.cutoff, h)
                    recent = float(last[(o, d, run.cutoff)])
                    truth = float(level.get((o, d, target), recent))
                    if run.model == "persistence":
                        mean, width = recent, 1.0
                    elif run.model == "poisson_glm":
                        mean, width = max(truth * rng.normal(1.0, 0.15), 0.0), 1.3
                    else:
                        mean, width = max(truth * rng.normal(0.8, 0.1), 0.0), 0.5
                    if run.run_id.endswith("-b"):
                        mean *= 1.05
                    sd = width * np.sqrt(mean + 0.25)
                    qs = {q: max(mean + z * sd, 0.0) for q, z in Z.items()}
                    rows.append({"run_id": run.run_id, "level": "dyad", "origin": o, "destination": d, "horizon": h,
                                 "target_month": target, "mean": mean, **qs,
                                 "p_positive": float(1 - np.exp(-mean))})
    return pd.DataFrame(rows)


def _with_totals(dyads: pd.DataFrame) -> pd.DataFrame:
    """Totals: sum of means, normal ranges from summed variances (good enough for a fixture)."""
    work = dyads.assign(var=((dyads["q950"] - dyads["q050"]) / 3.29) ** 2)
    parts = [dyads]
    for level, keys in (("origin_total", ["origin"]), ("destination_total", ["destination"]), ("world_total", [])):
        g = work.groupby(["run_id", "horizon", "target_month", *keys], as_index=False)[["mean", "var"]].sum()
        g["level"] = level
        g["origin"] = g["origin"] if "origin" in keys else "*"
        g["destination"] = g["destination"] if "destination" in keys else "*"
        sd = np.sqrt(g.pop("var"))
        for q, z in Z.items():
            g[q] = np.maximum(g["mean"] + z * sd, 0.0)
        g["p_positive"] = 1.0
        parts.append(g[dyads.columns])
    return pd.concat(parts, ignore_index=True)


def _actuals_by_level(frame: pd.DataFrame) -> pd.DataFrame:
    parts = [frame.assign(level="dyad")]
    for level, keys in (("origin_total", ["origin"]), ("destination_total", ["destination"]), ("world_total", [])):
        g = frame.groupby(["month", *keys], as_index=False)["arrivals"].sum()
        g["level"] = level
        g["origin"] = g["origin"] if "origin" in keys else "*"
        g["destination"] = g["destination"] if "destination" in keys else "*"
        parts.append(g[["origin", "destination", "month", "arrivals", "level"]])
    return pd.concat(parts, ignore_index=True).rename(columns={"month": "target_month", "arrivals": "actual"})


def _score(fc: pd.DataFrame, actuals: pd.DataFrame, vintage: str, scored_at: datetime, pub_shift: int) -> pd.DataFrame:
    """Textbook measures: WIS with K = 2 intervals (alpha 0.5 and 0.1) and the median (Bracher et al. 2021)."""
    keys = ["level", "origin", "destination", "target_month"]
    out = fc.merge(actuals, on=keys, how="inner")
    y, m = out["actual"], out["q500"]
    out["vintage"] = vintage
    out["scored_at"] = scored_at
    out["actual_published_on"] = [add_months(t, 1 + pub_shift) + timedelta(days=9) for t in out["target_month"]]
    out["actual_load_id"] = 100 + pub_shift
    out["actual_vintage_key"] = [f"{100 + pub_shift}@{p}" for p in out["actual_published_on"]]
    out["error"] = out["mean"] - y
    out["abs_error"] = out["error"].abs()
    out["sq_error"] = out["error"] ** 2
    out["covered_50"] = (out["q250"] <= y) & (y <= out["q750"])
    out["covered_90"] = (out["q050"] <= y) & (y <= out["q950"])
    disp = 0.25 * (out["q750"] - out["q250"]) + 0.05 * (out["q950"] - out["q050"])
    over = 0.5 * (m - y).clip(lower=0) + (out["q250"] - y).clip(lower=0) + (out["q050"] - y).clip(lower=0)
    under = 0.5 * (y - m).clip(lower=0) + (y - out["q750"]).clip(lower=0) + (y - out["q950"]).clip(lower=0)
    out["wis_dispersion"], out["wis_overprediction"], out["wis_underprediction"] = disp / 2.5, over / 2.5, under / 2.5
    out["wis"] = out["wis_dispersion"] + out["wis_overprediction"] + out["wis_underprediction"]
    out["interval_score_50"] = (out["q750"] - out["q250"]) + 4 * ((out["q250"] - y).clip(lower=0)
                                                                 + (y - out["q750"]).clip(lower=0))
    out["interval_score_90"] = (out["q950"] - out["q050"]) + 20 * ((out["q050"] - y).clip(lower=0)
                                                                  + (y - out["q950"]).clip(lower=0))
    mu = out["mean"].clip(lower=0.1)
    out["poisson_deviance"] = 2 * (np.where(y > 0, y * np.log(np.where(y > 0, y, 1) / mu), 0.0) - (y - mu))
    out["tweedie_deviance"] = out["poisson_deviance"]
    out["tweedie_power"], out["deviance_floor"] = 1.5, 0.1
    out["naive_scale"] = 5.0
    out["scaled_error"] = out["abs_error"] / 5.0
    out["n_cells"] = np.where(out["level"] == "dyad", 1, 4)
    out["predicted_positive"] = out["p_positive"] >= 0.5
    out["actual_positive"] = y > 0
    out["exceeded"] = y > out["q950"]
    out["batch_id"] = f"fixture-{vintage}-{pub_shift}"
    return out


def build_fixture(path: str, big_destination: str = "XAD", xss: bool = False) -> Fixture:
    """Write the invented warehouse to `path` (a DuckDB file); `big_destination` labels the largest destination."""
    rng = np.random.default_rng(20250401)
    destinations = (*DESTINATIONS[:-1], big_destination)
    first, latest = _truth(rng, destinations)
    runs = _runs()
    dyads = _dyad_forecasts(runs, first, latest, rng, destinations)
    forecasts = _with_totals(dyads).merge(runs, on="run_id")
    con = duckdb.connect(path)
    try:
        apply_sql(con)
        _insert_raw(con, first, latest, xss)
        con.register("_runs", runs.assign(path="snapshots/fixture", metadata_json="{}"))
        con.execute("INSERT INTO snapshot_runs SELECT run_id, cutoff, model, run_kind, as_of, created_at, path, "
                    "metadata_json FROM _runs")
        con.register("_fc", forecasts)
        con.execute("INSERT INTO forecast_rows SELECT run_id, cutoff, model, run_kind, level, origin, destination, "
                    "horizon, target_month, mean, q050, q250, q500, q750, q950, p_positive FROM _fc")
        scored = forecasts[forecasts["target_month"] <= pd.Timestamp(LAST_MONTH).date()]
        revised = {m for m, _ in REVISED}
        before = _score(scored, _actuals_by_level(first), "first_release", datetime(2025, 4, 11, 10), 0)
        latest_old = before.assign(vintage="latest")  # 'latest' written when first scored = first release
        newer = scored[scored["target_month"].isin(revised)]
        latest_new = _score(newer, _actuals_by_level(latest), "latest", datetime(2025, 4, 12, 10), 1)
        latest_new = latest_new.merge(latest_old[["run_id", "level", "origin", "destination", "target_month", "actual"]],
                                      on=["run_id", "level", "origin", "destination", "target_month"],
                                      suffixes=("", "_old"))
        latest_new = latest_new[latest_new["actual"] != latest_new.pop("actual_old")]
        accuracy = pd.concat([before, latest_old, latest_new], ignore_index=True)
        accuracy = accuracy.rename(columns={"created_at": "run_created_at"})
        table_cols = [r[0] for r in con.execute("DESCRIBE accuracy_rows").fetchall()]
        con.register("_acc", accuracy[table_cols])
        con.execute("INSERT INTO accuracy_rows BY NAME SELECT * FROM _acc")
        con.execute("CHECKPOINT")
    finally:
        con.close()
    return Fixture(path, first, latest, forecasts, runs, accuracy, big_destination)


ROW_KEY = ["run_id", "level", "origin", "destination", "target_month", "vintage"]


def newest_scoring(acc: pd.DataFrame) -> pd.DataFrame:
    """Per forecast row and vintage, the row scored last (plain pandas, for expected values)."""
    ordered = acc.sort_values(["scored_at", "actual_published_on", "actual_load_id"])
    return ordered.drop_duplicates(ROW_KEY, keep="last")


def counted_rows(acc: pd.DataFrame) -> pd.DataFrame:
    """The documented rule of accuracy_overview / the report: newest scoring, and one run per cutoff × model
    (the newest monthly run, else the newest backtest)."""
    rows = newest_scoring(acc)
    runs = rows[["run_id", "cutoff", "model", "run_kind", "run_created_at"]].drop_duplicates()
    runs = runs.assign(monthly=runs["run_kind"].eq("monthly"))
    chosen = runs.sort_values(["monthly", "run_created_at"]).drop_duplicates(["cutoff", "model"], keep="last")
    return rows[rows["run_id"].isin(chosen["run_id"])]


def scoring_view_rows(acc: pd.DataFrame) -> pd.DataFrame:
    """The scoring views' rule (accuracy_current): newest scoring, newest run per cutoff × model × run_kind."""
    rows = newest_scoring(acc)
    runs = rows[["run_id", "cutoff", "model", "run_kind", "run_created_at"]].drop_duplicates()
    chosen = runs.sort_values("run_created_at").drop_duplicates(["cutoff", "model", "run_kind"], keep="last")
    return rows[rows["run_id"].isin(chosen["run_id"])]
