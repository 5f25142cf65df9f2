"""build_features on a tiny hand-made panel: every value below was worked out by hand from the rows."""

from __future__ import annotations

import math
from datetime import date

import numpy as np
import pandas as pd
import pytest
from _feature_warehouse import insert

from dyadcast.features import FeatureError, build_features

NAN = float("nan")


def m(i: int) -> str:
    return f"2023-{i:02d}-01"


@pytest.fixture
def panel(con):
    """Six months, one flows load per month (published the 5th of the next month).

    QAA->XAA: 0, 4, 0, -, 2, 0      (-: destination XAA did not report 2023-04 at all)
    QAB->XAA: 3, 0, 0, -, 0, 6
    QAA->XAB: 1, 1, 1, 1, 1, 1
    """
    qaa_xaa, qab_xaa = [0, 4, 0, None, 2, 0], [3, 0, 0, None, 0, 6]
    rows = []
    for i in range(6):
        published = f"2023-{i + 2:02d}-05"
        if qaa_xaa[i] is not None:
            rows += [(i + 1, published, "QAA", "XAA", m(i + 1), qaa_xaa[i]),
                     (i + 1, published, "QAB", "XAA", m(i + 1), qab_xaa[i])]
        rows.append((i + 1, published, "QAA", "XAB", m(i + 1), 1))
    insert(con, "raw_flows", rows)
    insert(con, "raw_dyad_attributes", [
        (20, "2023-01-01", "QAA", "XAA", 1000.0, 1, 0, 1, 99.0),
        (21, "2023-09-01", "QAA", "XAA", 9999.0, 0, 0, 0, 0.0),  # published after the as-of below: unseen
    ])
    return con


def row(fs, origin: str, destination: str, month: int) -> pd.Series:
    f = fs.frame
    hit = f[(f.origin == origin) & (f.destination == destination) & (f.month == pd.Timestamp(m(month)))]
    assert len(hit) == 1
    return hit.iloc[0]


def close(a: float, b: float) -> bool:
    return (math.isnan(a) and math.isnan(b)) or math.isclose(a, b, rel_tol=1e-12)


def test_history_features(panel):
    fs = build_features(panel, date(2023, 6, 1), date(2023, 7, 31), horizon=2)
    r = row(fs, "QAA", "XAA", 6)
    expected = {
        "lag_1": 0, "lag_2": 2, "lag_3": NAN, "lag_4": 0, "lag_5": 4, "lag_6": 0, "lag_7": NAN, "lag_12": NAN,
        "roll_mean_3": (2 + 0) / 2,             # 2023-04 missing: mean of the two reported months
        "roll_mean_6": (0 + 4 + 0 + 2 + 0) / 5,
        "roll_mean_12": 6 / 5,
        "months_since_positive": 1,             # last positive 2023-05
        # QAA outflow per month: 1, 5, 1, 1 (XAA missing), 3, 1; the share uses months the dyad reports only
        "origin_share_12": 6 / (1 + 5 + 1 + 3 + 1),
        "origin_outflow_lag_1": 1, "origin_outflow_roll_3": (1 + 3 + 1) / 3,
        "destination_inflow_lag_1": 6,          # XAA inflow: 3, 4, 0, -, 2, 6
        "destination_inflow_roll_3": (2 + 6) / 2,
        "log_distance": math.log(1000), "contiguous": 1, "common_language": 0, "colonial_tie": 1,
        "log_diaspora": math.log(100), "calendar_month": 6,
        "target_1": NAN, "target_2": NAN,       # after the cutoff
    }
    for name, value in expected.items():
        assert close(float(r[name]), float(value)), (name, r[name], value)
    assert row(fs, "QAA", "XAB", 6)["origin_share_12"] == pytest.approx(6 / 12)
    assert row(fs, "QAA", "XAA", 4)["months_since_positive"] == 2  # missing month counts as not positive
    assert row(fs, "QAA", "XAA", 1)["months_since_positive"] == 120  # never positive: the cap
    assert math.isnan(row(fs, "QAB", "XAA", 4)["destination_inflow_lag_1"])
    assert row(fs, "QAB", "XAA", 4)["destination_inflow_roll_3"] == pytest.approx((4 + 0) / 2)
    assert math.isnan(row(fs, "QAB", "XAA", 1)["log_distance"])  # no attributes for this dyad


def test_targets_stop_at_the_cutoff_and_at_missing_months(panel):
    fs = build_features(panel, date(2023, 6, 1), date(2023, 7, 31), horizon=2)
    assert fs.target_names == ["target_1", "target_2"]
    assert (row(fs, "QAA", "XAA", 4)[["target_1", "target_2"]] == [2, 0]).all()
    assert row(fs, "QAA", "XAA", 2)["target_1"] == 0 and math.isnan(row(fs, "QAA", "XAA", 2)["target_2"])
    assert row(fs, "QAA", "XAA", 5)["target_1"] == 0 and math.isnan(row(fs, "QAA", "XAA", 5)["target_2"])
    early = build_features(panel, date(2023, 5, 1), date(2023, 7, 31), horizon=2)
    assert early.frame.month.max() == pd.Timestamp(m(5))
    assert row(early, "QAA", "XAA", 4)["target_1"] == 2 and math.isnan(row(early, "QAA", "XAA", 4)["target_2"])


def test_frame_shape_types_and_start(panel):
    fs = build_features(panel, date(2023, 6, 1), date(2023, 7, 31), horizon=3)
    f = fs.frame
    assert len(f) == 3 * 6 and fs.metadata["dyads"] == 3 and fs.metadata["forecast_rows"] == 3
    assert list(f.columns) == ["origin", "destination", "month", *fs.feature_names, *fs.target_names]
    assert f.month.dtype.kind == "M" and (f.month.dt.day == 1).all()
    assert f.calendar_month.dtype.kind == "i"
    assert all(f[c].dtype == np.float64 for c in fs.feature_names if c != "calendar_month")
    assert len(fs.forecast_rows()) == 3 and (fs.forecast_rows().month == pd.Timestamp(m(6))).all()
    later = build_features(panel, date(2023, 6, 1), date(2023, 7, 31), horizon=3, start=date(2023, 5, 1))
    assert sorted(later.frame.month.unique()) == [pd.Timestamp(m(5)), pd.Timestamp(m(6))]
    # history before `start` still feeds the lags
    assert row(later, "QAA", "XAA", 5)["lag_4"] == 4


def test_as_of_hides_later_months_and_revisions(panel):
    fs = build_features(panel, date(2023, 6, 1), date(2023, 7, 1), horizon=1)  # 2023-06 published 07-05
    assert math.isnan(row(fs, "QAA", "XAA", 6)["lag_1"])
    assert math.isnan(row(fs, "QAA", "XAA", 5)["target_1"])
    assert row(fs, "QAA", "XAA", 6)["log_distance"] == pytest.approx(math.log(1000))


def test_indicators_use_latest_published_month(panel):
    insert(panel, "raw_origin_indicators", [
        (30, "2023-02-05", "QAA", m(1), "conflict", 10.0),
        (31, "2023-04-05", "QAA", m(2), "conflict", 20.0),   # two months' reporting lag
        (32, "2023-08-05", "QAA", m(3), "conflict", 30.0),   # published after the as-of: unseen
        (33, "2023-06-20", "QAA", m(1), "conflict", 11.0),   # revision of 2023-01
    ])
    insert(panel, "raw_destination_indicators", [(34, "2023-05-01", "XAA", m(3), "recognition", 0.5)])
    fs = build_features(panel, date(2023, 6, 1), date(2023, 7, 31), horizon=1)
    push = [row(fs, "QAA", "XAA", i)["push_conflict"] for i in range(1, 7)]
    assert push == [11, 20, 20, 20, 20, 20]
    assert math.isnan(row(fs, "QAB", "XAA", 6)["push_conflict"])  # no indicator for this origin
    pull = [row(fs, "QAB", "XAA", i)["pull_recognition"] for i in range(1, 7)]
    assert all(math.isnan(v) for v in pull[:2]) and pull[2:] == [0.5] * 4
    assert math.isnan(row(fs, "QAA", "XAB", 6)["pull_recognition"])
    before_revision = build_features(panel, date(2023, 6, 1), date(2023, 6, 10), horizon=1)
    assert row(before_revision, "QAA", "XAA", 1)["push_conflict"] == 10
    assert {"push_conflict", "pull_recognition"} <= set(fs.feature_names)


def test_clear_errors(panel):
    with pytest.raises(FeatureError, match="load flows files first"):
        build_features(panel, date(2023, 1, 1), date(2023, 1, 31))  # first load published 2023-02-05
    with pytest.raises(FeatureError, match="is after cutoff"):
        build_features(panel, date(2023, 3, 1), date(2023, 7, 31), start=date(2023, 5, 1))
    with pytest.raises(FeatureError, match="horizon"):
        build_features(panel, date(2023, 3, 1), date(2023, 7, 31), horizon=0)
    with pytest.raises(FeatureError, match="before the first day of cutoff month"):
        build_features(panel, date(2023, 6, 1), date(2023, 5, 31))
