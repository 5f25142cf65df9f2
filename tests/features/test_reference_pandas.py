"""The SQL features against a plain pandas re-implementation of the contract, on random invented drops.

pandas (groupby-shift and rolling means with min_periods=1) is the reference library here; the vintage
rules are re-derived row by row from DEVELOPERS.md ("Vintage semantics"), independently of sql/.
"""

from __future__ import annotations

from datetime import date

import numpy as np
import pandas as pd
import pytest
from _feature_warehouse import load_drops, random_drops

from dyadcast.features import build_features


def reference_panel(drops: dict[str, pd.DataFrame], cutoff: date, as_of: date) -> pd.DataFrame:
    flows = drops["raw_flows"]
    flows = flows[flows.published_on <= as_of]
    attrs = drops["raw_dyad_attributes"]
    attrs = attrs[attrs.published_on <= as_of]
    universe = pd.concat([flows[["origin", "destination"]], attrs[["origin", "destination"]]]).drop_duplicates()
    winners = (flows.sort_values(["published_on", "load_id"])
               .groupby(["destination", "month"]).tail(1)[["destination", "month", "load_id", "published_on"]])
    listed = flows.merge(winners, on=["destination", "month", "load_id", "published_on"])
    months = pd.date_range(pd.Timestamp(flows.month.min()), pd.Timestamp(cutoff), freq="MS")
    grid = universe.merge(pd.DataFrame({"month": months}), how="cross")
    reported = winners.assign(month=pd.to_datetime(winners.month), reported=True)[["destination", "month", "reported"]]
    grid = grid.merge(reported, on=["destination", "month"], how="left")
    grid = grid.merge(listed.assign(month=pd.to_datetime(listed.month))[["origin", "destination", "month", "arrivals"]],
                      on=["origin", "destination", "month"], how="left")
    grid["arrivals"] = np.where(grid.reported.fillna(False).astype(bool), grid.arrivals.fillna(0), np.nan)
    return grid.drop(columns="reported").sort_values(["origin", "destination", "month"]).reset_index(drop=True)


def reference_features(panel: pd.DataFrame, horizon: int) -> pd.DataFrame:
    out = panel[["origin", "destination", "month"]].copy()
    by_dyad = panel.groupby(["origin", "destination"], sort=False)["arrivals"]
    for k in range(1, 13):
        out[f"lag_{k}"] = by_dyad.shift(k - 1)
    for w in (3, 6, 12):
        out[f"roll_mean_{w}"] = by_dyad.transform(lambda s, w=w: s.rolling(w, min_periods=1).mean())
    for h in range(1, horizon + 1):
        out[f"target_{h}"] = by_dyad.shift(-h)
    positive_month = panel.month.where(panel.arrivals > 0)
    last_positive = positive_month.groupby([panel.origin, panel.destination]).ffill()
    gap = (panel.month.dt.year - last_positive.dt.year) * 12 + panel.month.dt.month - last_positive.dt.month
    out["months_since_positive"] = gap.clip(upper=120).fillna(120)
    outflow = panel.groupby(["origin", "month"])["arrivals"].sum(min_count=1).rename("outflow").reset_index()
    outflow["roll"] = outflow.groupby("origin")["outflow"].transform(lambda s: s.rolling(3, min_periods=1).mean())
    inflow = panel.groupby(["destination", "month"])["arrivals"].sum(min_count=1).rename("inflow").reset_index()
    inflow["roll"] = inflow.groupby("destination")["inflow"].transform(lambda s: s.rolling(3, min_periods=1).mean())
    joined = panel.merge(outflow, on=["origin", "month"], how="left")
    out["origin_outflow_lag_1"] = joined["outflow"].to_numpy()
    out["origin_outflow_roll_3"] = joined["roll"].to_numpy()
    joined_in = panel.merge(inflow, on=["destination", "month"], how="left")
    out["destination_inflow_lag_1"] = joined_in["inflow"].to_numpy()
    out["destination_inflow_roll_3"] = joined_in["roll"].to_numpy()
    own = joined.groupby(["origin", "destination"])["arrivals"].transform(
        lambda s: s.rolling(12, min_periods=1).sum())
    own = own.where(joined.groupby(["origin", "destination"])["arrivals"].transform(
        lambda s: s.notna().rolling(12, min_periods=1).sum()) > 0)
    denominator = joined["outflow"].where(joined["arrivals"].notna())
    total = denominator.groupby([joined.origin, joined.destination]).transform(
        lambda s: s.rolling(12, min_periods=1).sum())
    out["origin_share_12"] = (own / total.where(total != 0)).to_numpy()
    return out


@pytest.mark.parametrize("seed, cutoff, as_of", [
    (1, date(2023, 3, 1), date(2023, 5, 1)),
    (2, date(2022, 11, 1), date(2023, 1, 20)),
    (3, date(2023, 6, 1), date(2023, 8, 15)),
    (4, date(2023, 1, 1), date(2023, 2, 10)),
])
def test_sql_features_match_pandas(con, seed, cutoff, as_of):
    drops = random_drops(seed)
    load_drops(con, drops)
    horizon = 4
    fs = build_features(con, cutoff, as_of, horizon=horizon)
    expected = reference_features(reference_panel(drops, cutoff, as_of), horizon)
    got = fs.frame[expected.columns].reset_index(drop=True)
    expected["month"] = expected["month"].astype(got["month"].dtype)
    assert len(got) > 50
    pd.testing.assert_frame_equal(got, expected, check_dtype=False, check_exact=False, rtol=1e-12, atol=1e-12)


@pytest.mark.parametrize("seed, cutoff, as_of, horizon, start", [
    (5, date(2023, 3, 1), date(2023, 5, 1), 1, date(2022, 9, 1)),     # training window: history before it feeds lags
    (6, date(2023, 4, 1), date(2023, 6, 1), 9, date(2022, 3, 1)),     # window starts before 12 months of history
    (7, date(2023, 2, 1), date(2023, 4, 1), 15, None),                # horizon above 12: targets beyond one year
    (8, date(2023, 6, 1), date(2023, 8, 15), 24, date(2023, 1, 1)),   # the longest horizon the features accept
])
def test_training_window_and_horizons_match_pandas(con, seed, cutoff, as_of, horizon, start):
    """Targets come from leads and a list window above six months, and `start` only trims rows: same as pandas."""
    drops = random_drops(seed)
    load_drops(con, drops)
    fs = build_features(con, cutoff, as_of, horizon=horizon, start=start)
    expected = reference_features(reference_panel(drops, cutoff, as_of), horizon)
    if start is not None:
        expected = expected[expected["month"] >= pd.Timestamp(start)].reset_index(drop=True)
    got = fs.frame[expected.columns].reset_index(drop=True)
    expected["month"] = expected["month"].astype(got["month"].dtype)
    assert len(got) > 20
    assert fs.target_names == [f"target_{h}" for h in range(1, horizon + 1)]
    pd.testing.assert_frame_equal(got, expected, check_dtype=False, check_exact=False, rtol=1e-12, atol=1e-12)


@pytest.mark.parametrize("seed, cutoff, as_of, horizon, start", [
    (9, date(2023, 3, 1), date(2023, 5, 1), 4, None),
    (10, date(2023, 4, 1), date(2023, 6, 1), 9, date(2022, 3, 1)),
    (11, date(2023, 6, 1), date(2023, 8, 15), 2, date(2023, 1, 1)),
])
def test_sql_macro_matches_pandas_and_the_feature_build(con, seed, cutoff, as_of, horizon, start):
    """The analysts' macro dyad_features (sql/40_01) and the grid build (dyadcast.grid) give the same rows."""
    drops = random_drops(seed)
    load_drops(con, drops)
    table = con.sql("SELECT * FROM dyad_features(?, ?, ?, ?)", params=[as_of, cutoff, horizon, start]).to_arrow_table()
    macro = table.drop_columns(["targets"]).to_pandas()
    targets = np.array(table.column("targets").to_pylist(), dtype=float).reshape(-1, horizon)
    for h in range(horizon):
        macro[f"target_{h + 1}"] = targets[:, h]
    macro["month"] = pd.to_datetime(macro["month"])
    expected = reference_features(reference_panel(drops, cutoff, as_of), horizon)
    if start is not None:
        expected = expected[expected["month"] >= pd.Timestamp(start)].reset_index(drop=True)
    expected["month"] = expected["month"].astype(macro["month"].dtype)
    assert len(macro) > 20
    pd.testing.assert_frame_equal(macro[expected.columns], expected, check_dtype=False, check_exact=False,
                                  rtol=1e-12, atol=1e-12)
    built = build_features(con, cutoff, as_of, horizon=horizon, start=start).frame
    built["month"] = built["month"].astype(macro["month"].dtype)
    pd.testing.assert_frame_equal(built[macro.columns].reset_index(drop=True), macro, check_dtype=False,
                                  check_exact=False, rtol=1e-12, atol=1e-12)
