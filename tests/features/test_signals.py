"""Organic signals: the lead / window choice on a planted 9-day lead, and the feature's day arithmetic."""

from __future__ import annotations

from datetime import date, timedelta

import numpy as np
import pandas as pd
import pytest
from _feature_warehouse import insert, insert_frame
from _signal_synthetic import planted_lead

from dyadcast.config import SignalConfig
from dyadcast.features import build_features
from dyadcast.signals import validate_config


def load_planted(con, seed: int) -> tuple[pd.DataFrame, pd.DataFrame]:
    signal, monthly = planted_lead(seed=seed)
    # Each origin sends about 70 % to XAA and 30 % to XAB; the outflow compared below is their sum.
    flows = []
    for dest, share in (("XAA", 0.7), ("XAB", 0.3)):
        part = monthly.assign(destination=dest, arrivals=np.floor(monthly.arrivals * share).astype("int64"))
        flows.append(part)
    flows = pd.concat(flows)
    flows["month"] = pd.to_datetime(flows["month"]).dt.date
    flows["published_on"] = [m + timedelta(days=40) for m in flows["month"]]
    flows["load_id"] = 1
    insert_frame(con, "raw_flows", flows)
    insert_frame(con, "raw_signals", signal.assign(load_id=2, published_on=date(2025, 2, 1), signal="search"))
    outflow = flows.groupby(["origin", "month"], as_index=False)["arrivals"].sum()
    return signal, outflow


def pandas_monthly(signal: pd.DataFrame, lag: int, window: int) -> pd.DataFrame:
    """Reference: s_d = mean(intensity[d-L-W+1 .. d-L]) with pandas rolling + shift, then calendar-month means."""
    daily = signal.pivot(index="date", columns="country", values="intensity")
    daily.index = pd.to_datetime(daily.index)
    last = daily.index.max() + pd.offsets.MonthEnd(0)  # s_d exists for every day of the last month
    daily = daily.reindex(pd.date_range(daily.index.min(), last, freq="D"))
    smooth = daily.rolling(window, min_periods=1).mean().shift(lag)
    return smooth.resample("MS").mean()


def within_corr(x: pd.DataFrame, y: pd.DataFrame) -> float:
    ok = x.notna() & y.notna()
    xd = x.where(ok) - x.where(ok).mean()
    yd = y.where(ok) - y.where(ok).mean()
    return float((xd * yd).sum().sum() / np.sqrt((xd**2).sum().sum() * (yd**2).sum().sum()))


@pytest.mark.parametrize("seed", [11, 12])
def test_planted_nine_day_lead_is_recovered(con, seed):
    signal, outflow = load_planted(con, seed)
    fs = build_features(con, date(2024, 12, 1), date(2025, 3, 1), horizon=1, signal_config=SignalConfig())
    choice = fs.metadata["signals"]["search"]
    assert abs(choice["lag_days"] - 9) <= 4, choice["top"]
    assert "signal_search" in fs.feature_names

    # Independent check with pandas rolling / shift / resample (the reference library).
    y = outflow.pivot(index="month", columns="origin", values="arrivals")
    y.index = pd.to_datetime(y.index)
    chosen = pandas_monthly(signal, choice["lag_days"], choice["window_days"]).reindex(y.index)
    raw = pandas_monthly(signal, 0, 1).reindex(y.index)
    log_y = np.log1p(y)
    change_chosen, change_raw = within_corr(chosen.diff(), log_y.diff()), within_corr(raw.diff(), log_y.diff())
    assert change_chosen == pytest.approx(choice["correlation"], abs=1e-9)
    assert change_raw == pytest.approx(choice["raw_correlation"], abs=1e-9)
    assert change_chosen > change_raw + 0.02
    assert within_corr(chosen, log_y) > within_corr(raw, log_y)  # also better in levels


def test_feature_uses_only_days_up_to_the_end_of_the_anchor_month(con):
    """Intensity = day of the year (2024), so every mean is worked out by hand."""
    insert(con, "raw_flows", [(1, "2024-06-10", "QAA", "XAA", f"2024-{k:02d}-01", k) for k in range(1, 6)])
    days = pd.date_range("2024-01-01", "2024-06-30", freq="D")
    insert(con, "raw_signals", [(2, "2024-07-01", "QAA", d.date(), "news", float(d.day_of_year)) for d in days])

    def feature(lag: int, window: int) -> pd.Series:
        config = SignalConfig(lag_days_min=lag, lag_days_max=lag, window_days=(window,))
        fs = build_features(con, date(2024, 5, 1), date(2024, 7, 1), horizon=1, signal_config=config)
        assert fs.metadata["signals"]["news"]["lag_days"] == lag
        return fs.frame.set_index("month")["signal_news"]

    # L=3, W=2, anchor January (last day = day 31): s_d for d = Feb 1..3 averages days (28,29), (29,30), (30,31)
    assert feature(3, 2)[pd.Timestamp("2024-01-01")] == pytest.approx(29.5)
    # L=0, W=3: s on the last day of January = mean(days 29..31)
    assert feature(0, 3)[pd.Timestamp("2024-01-01")] == pytest.approx(30.0)
    # L=10, W=1, anchor April (last day = day 121): days 112..121
    assert feature(10, 1)[pd.Timestamp("2024-04-01")] == pytest.approx(116.5)
    # May's signal days (after the end of April) must not move April's feature
    con.execute("UPDATE raw_signals SET intensity = 0 WHERE date >= DATE '2024-05-01'")
    assert feature(10, 1)[pd.Timestamp("2024-04-01")] == pytest.approx(116.5)


def test_bad_signal_config_is_rejected():
    with pytest.raises(ValueError, match="lag_days_min"):
        validate_config(SignalConfig(lag_days_min=5, lag_days_max=2))
    with pytest.raises(ValueError, match="window_days"):
        validate_config(SignalConfig(window_days=(0, 7)))
