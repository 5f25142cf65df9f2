"""The measuring parts of the benchmark: memory and time per stage, stored-run copies, target verdicts."""

from __future__ import annotations

import json
import time
from datetime import date

import numpy as np
import pandas as pd
import run_bench
from meter import Meter
from seed_runs import plan, shifted


def test_meter_sees_a_300_mb_allocation_and_the_time(tmp_path):
    meter = Meter(tmp_path / "out.json", interval=0.01)
    with meter.stage("alloc") as rec:
        block = np.ones(300 * 1024 * 1024 // 8)  # 300 MiB, touched
        time.sleep(0.05)
        rec["sum"] = float(block[:10].sum())
    del block
    with meter.stage("idle"):
        time.sleep(0.05)
    meter.close()
    alloc, idle = meter.records
    assert alloc["peak_rss_mb"] - alloc["rss_before_mb"] >= 250
    assert alloc["wall_s"] >= 0.05 and alloc["status"] == "ok"
    assert idle["peak_rss_mb"] < alloc["peak_rss_mb"] - 200  # the earlier peak is not charged to "idle"
    saved = json.loads((tmp_path / "out.json").read_text())
    assert [r["stage"] for r in saved["records"]] == ["alloc", "idle"] and saved["running"] is None


def test_copies_move_target_months_with_the_cutoff():
    forecast = pd.DataFrame({"level": "dyad", "origin": "XAA", "destination": "QMA", "horizon": [1, 2, 6],
                             "target_month": pd.to_datetime(["2025-01-01", "2025-02-01", "2025-06-01"]),
                             "mean": [1.0, 2.0, 3.0]})
    out = shifted(forecast, date(2024, 11, 1))
    assert list(out["target_month"].dt.strftime("%Y-%m")) == ["2024-12", "2025-01", "2025-05"]
    assert out["target_month"].dtype == forecast["target_month"].dtype
    assert plan(date(2025, 12, 1), 5, ("a", "b")) == [
        (date(2025, 12, 1), "a"), (date(2025, 12, 1), "b"), (date(2025, 11, 1), "a"), (date(2025, 11, 1), "b"),
        (date(2025, 10, 1), "a")]


def _record(stage: str, wall: float, peak: float = 100.0, status: str = "ok") -> dict:
    return {"stage": stage, "wall_s": wall, "peak_rss_mb": peak, "status": status}


def test_target_verdicts_and_lower_bounds():
    groups = {
        "backfill_dense": {"status": "ok", "records": [{**_record("dense_flows_ingest", 25.0),
                                                        "rows_by_kind": {"flows": 9_600_000}}]},
        "features_pandas": {"status": "ok", "records": [_record("pandas_features", 100.0)]},
        "features_sql": {"status": "ok", "records": [_record("sql_dyad_features", 8.0), _record("grid_dyad_features", 4.0)],
                         "extra": {"pandas_vs_sql": {"cells_differing": 0, "rows": 10},
                                   "pandas_vs_grid": {"cells_differing": 3, "rows": 10}}},
        "score_12": {"status": "ok", "records": [_record("score_12_stored", 10.0)]},
        "score_120": {"status": "stopped at the 180 s cap", "records": [_record("score_120_stored", 12.0, status="x")]},
        "cycle": {"status": "stopped at the 900 s cap", "records": [_record("features", 30.0, 3000.0),
                                                                    _record("fit_forecast_tweedie_gbm", 80.0)]},
    }
    verdict = {t["target"]: t for t in run_bench.targets(groups, 800.0, small=False)}
    assert verdict["backfill ingest of the dense flows file (every dyad-month)"]["met"] is True
    assert verdict["pandas time / SQL dyad_features macro time"]["value"] == 12.5
    assert verdict["pandas time / SQL dyad_features macro time"]["met"] is True
    assert verdict["pandas time / feature build's dyad columns (DuckDB + numpy grid) time"]["value"] == 25.0
    assert verdict["pandas baseline vs SQL macro: differing cells on the sample"]["met"] is True
    assert verdict["pandas baseline vs grid build: differing cells on the sample"]["met"] is False
    assert verdict["pandas time / cycle features (build_features + dormant split) time"]["value"] == 3.33
    assert verdict["pandas time / cycle features (build_features + dormant split) time"]["met"] is False
    assert verdict["scoring time, 120 stored runs / 12 stored runs"]["met"] is None  # stopped: not a measurement
    cycle = verdict["monthly cycle without Prefect start (GX start included)"]
    assert cycle["value"] == 110.0 and cycle["met"] is False and "lower bound" in cycle["note"]
    assert verdict["peak RSS of the monthly cycle"]["value"] == 3000.0
    assert verdict["make bench wall time"]["met"] is True
