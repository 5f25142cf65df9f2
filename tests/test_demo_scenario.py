"""The invented demo scenario: determinism, planted stylized facts, and drop files that obey the contract.

Thresholds on stylized facts (zero share, flow sizes, distance decay, contiguity, revisions) are the
brief's targets: common practice, no source.
"""

from __future__ import annotations

import re
import subprocess
import sys
import time
from datetime import date
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from sklearn.metrics.pairwise import haversine_distances

from dyadcast.demo import dynamics
from dyadcast.demo.drops import (
    KINDS,
    publication_date,
    write_examples,
    write_history_drop,
    write_monthly_drop,
)
from dyadcast.demo.geography import EARTH_RADIUS_KM, haversine_km
from dyadcast.demo.scenario import generate_scenario, scenario_stats

REPO = Path(__file__).resolve().parents[1]
USER_ASSIGNED = re.compile(r"^(?:AA[A-Z]|Q[M-Z][A-Z]|X[A-Z][A-Z]|ZZ[A-Z])$")
COLUMNS = {
    "flows": ["origin", "destination", "month", "arrivals"],
    "origin_indicators": ["country", "month", "indicator", "value"],
    "destination_indicators": ["country", "month", "indicator", "value"],
    "dyad_attributes": [
        "origin",
        "destination",
        "distance_km",
        "contiguous",
        "common_language",
        "colonial_tie",
        "diaspora",
    ],
    "signals": ["country", "date", "signal", "intensity"],
}
KEYS = {
    "flows": ["origin", "destination", "month"],
    "origin_indicators": ["country", "month", "indicator"],
    "destination_indicators": ["country", "month", "indicator"],
    "dyad_attributes": ["origin", "destination"],
    "signals": ["country", "date", "signal"],
}
SUFFIX = re.compile(r"^(?P<kind>[a-z_]+?)_(?P<date>\d{4}-\d{2}-\d{2})\.(?:csv|parquet)$")


@pytest.fixture(scope="module")
def scenario():
    return generate_scenario(seed=7)


@pytest.fixture(scope="module")
def stats(scenario):
    return scenario_stats(scenario)


def _read(path: Path) -> pd.DataFrame:
    if path.suffix == ".csv":
        return pd.read_csv(path, dtype={"month": str, "date": str, "published_on": str})
    return pd.read_parquet(path)


def _kind(path: Path) -> str:
    return next(k for k in sorted(KINDS, key=len, reverse=True) if path.name.startswith(k + "_"))


# --- determinism and speed ---------------------------------------------------------------------------


def test_same_seed_same_scenario_other_seed_differs(scenario):
    again = generate_scenario(seed=7)
    for name in (
        "flows",
        "first_release",
        "origin_indicators",
        "destination_indicators",
        "dyad_attributes",
        "signals",
    ):
        pd.testing.assert_frame_equal(getattr(scenario, name), getattr(again, name))
    assert scenario.crises == again.crises
    other = generate_scenario(seed=8)
    assert not other.flows.arrivals.equals(scenario.flows.arrivals)


def test_generation_is_fast():
    began = time.perf_counter()
    generate_scenario(seed=3)
    assert time.perf_counter() - began < 5.0  # brief: under ~3 s; slack for a shared 2-core machine


# --- the invented region -----------------------------------------------------------------------------


def test_region_size_and_codes(scenario, stats):
    assert stats["n_origins"] >= 12 and stats["n_destinations"] >= 30
    countries = set(scenario.flows.origin) | set(scenario.flows.destination) | set(scenario.signals.country)
    assert all(USER_ASSIGNED.match(c) for c in countries), sorted(
        c for c in countries if not USER_ASSIGNED.match(c)
    )
    assert (scenario.flows.origin != scenario.flows.destination).all()
    months = sorted(scenario.flows.month.unique())
    assert months[0] == "2017-01" and months[-1] == "2025-12" and len(months) == 108
    assert len(scenario.flows) == stats["n_dyads"] * 108  # a dense panel: zeros included


def test_haversine_matches_scikit_learn():
    # Reference library: sklearn.metrics.pairwise.haversine_distances (unit sphere, radians) times the radius.
    rng = np.random.default_rng(0)
    pts = rng.uniform([-60, -170], [60, 170], size=(40, 2))
    ours = haversine_km(pts[:, None, 0], pts[:, None, 1], pts[None, :, 0], pts[None, :, 1])
    ref = haversine_distances(np.radians(pts)) * EARTH_RADIUS_KM
    np.testing.assert_allclose(ours, ref, rtol=1e-9, atol=1e-6)
    # One degree of arc along a meridian is 2*pi*R/360 by definition of the sphere.
    assert haversine_km(np.array(0.0), np.array(0.0), np.array(1.0), np.array(0.0)) == pytest.approx(
        2 * np.pi * EARTH_RADIUS_KM / 360
    )


def test_dyad_attributes_are_consistent(scenario):
    dy = scenario.dyad_attributes
    coords = scenario.coordinates.set_index("country")
    o, d = coords.loc[dy.origin], coords.loc[dy.destination]
    dist = haversine_km(o.lat.to_numpy(), o.lon.to_numpy(), d.lat.to_numpy(), d.lon.to_numpy())
    np.testing.assert_allclose(dy.distance_km, dist, atol=0.051)  # rounded to 0.1 km
    assert (dy.distance_km > 0).all()
    assert dy[dy.contiguous == 1].distance_km.max() < dy[dy.contiguous == 0].distance_km.median()
    assert dy.groupby("origin").contiguous.max().eq(1).all()  # every origin borders someone
    for flag in ("contiguous", "common_language", "colonial_tie"):
        assert set(dy[flag].unique()) == {0, 1}
    assert (dy.diaspora >= 0).all() and dy.diaspora.max() > 10_000


# --- stylized facts ----------------------------------------------------------------------------------


def test_flows_are_mostly_zero_small_and_bursty(scenario, stats):
    assert stats["zero_share"] > 0.8
    assert 10 <= stats["positive_quantiles"]["q50"] <= 300
    assert stats["max"] >= 10_000
    assert stats["share_positive_10_to_500"] > 0.7
    y = scenario.flows.arrivals
    assert y.dtype.kind == "i" and (y >= 0).all()


def test_distance_decay_and_contiguity(scenario):
    per_dyad = scenario.flows.groupby(["origin", "destination"], as_index=False).arrivals.mean()
    per_dyad = per_dyad.merge(scenario.dyad_attributes, on=["origin", "destination"])
    r = np.corrcoef(np.log1p(per_dyad.arrivals), np.log(per_dyad.distance_km))[0, 1]
    assert r < -0.3
    pos = scenario.flows[scenario.flows.arrivals > 0].merge(
        scenario.dyad_attributes, on=["origin", "destination"]
    )
    assert np.corrcoef(np.log(pos.arrivals), np.log(pos.distance_km))[0, 1] < 0
    contiguous = per_dyad.groupby("contiguous").arrivals.mean()
    assert contiguous[1] > 5 * contiguous[0]


def test_crises_burst_and_fade(scenario):
    assert 2 <= len(scenario.crises) <= 4
    assert len({c["origin"] for c in scenario.crises}) == len(scenario.crises)
    for c in scenario.crises:
        totals = scenario.flows[scenario.flows.origin == c["origin"]].groupby("month").arrivals.sum()
        before = totals[totals.index < c["start_month"]].tail(12)
        assert c["peak_size"] >= 20_000 and c["peak_size"] > 20 * before.median(), c
        assert totals[c["peak_month"]] == c["peak_size"]
        months = list(totals.index)
        peak = months.index(c["peak_month"])
        after = totals.iloc[peak + 1 : peak + 4]
        assert (after > 0.1 * c["peak_size"]).all(), f"{c['origin']} should fade over months, not vanish"
        assert totals.iloc[peak + 9] < 0.25 * c["peak_size"], f"{c['origin']} should have faded 9 months on"


def _first_rise(values: np.ndarray, begin: int, factor: float) -> int:
    """First month from `begin` whose value exceeds `factor` times the median of the 12 months before it."""
    for i in range(begin, len(values)):
        if values[i] > factor * max(np.median(values[max(0, i - 12) : i]), 1.0):
            return i
    raise AssertionError("no rise found")


def test_conflict_rises_one_to_three_months_before_bursts(scenario):
    oi = scenario.origin_indicators
    for c in scenario.crises:
        totals = scenario.flows[scenario.flows.origin == c["origin"]].groupby("month").arrivals.sum()
        months = list(totals.index)
        begin = max(1, months.index(c["start_month"]) - 3)
        for indicator in ("conflict_events", "conflict_fatalities"):
            series = oi[(oi.country == c["origin"]) & (oi.indicator == indicator)].set_index("month").value
            lead = _first_rise(totals.to_numpy(float), begin, 3.0) - _first_rise(
                series.loc[months].to_numpy(float), begin, 2.0
            )
            assert 1 <= lead <= 3, (c, indicator, lead)


def test_seasonality_is_visible(scenario):
    totals = scenario.flows.groupby(["origin", "month"], as_index=False).arrivals.sum()
    totals["rel"] = totals.arrivals / totals.groupby("origin").arrivals.transform("median").clip(lower=1)
    profile = totals.groupby(totals.month.str[5:7]).rel.median()
    assert profile.max() / profile.min() > 1.2


def test_indicator_ranges_and_names(scenario):
    oi, di = scenario.origin_indicators, scenario.destination_indicators
    assert {"conflict_events", "conflict_fatalities", "instability_index", "gdp_growth"} <= set(oi.indicator)
    assert set(di.indicator) == {"recognition_rate", "policy_openness"}
    rec = di[di.indicator == "recognition_rate"].value
    opn = di[di.indicator == "policy_openness"].value
    assert rec.between(0, 1).all() and opn.between(0, 10).all()
    assert oi[oi.indicator.str.startswith("conflict")].value.ge(0).all()
    assert oi.groupby(["country", "indicator"]).size().eq(108).all()
    assert scenario.signals.intensity.between(0, 100).all()


# --- the planted signal lead -------------------------------------------------------------------------


def test_delay_distribution_has_the_planted_mean_and_spread():
    pmf = dynamics.delay_pmf()
    days = np.arange(len(pmf))
    mean = float((days * pmf).sum())
    sd = float(np.sqrt(((days - mean) ** 2 * pmf).sum()))
    assert mean == pytest.approx(9.0, abs=0.1) and sd == pytest.approx(3.0, abs=0.15)


def test_signal_cross_correlation_peaks_at_the_planted_lead(scenario, stats):
    truth = scenario.daily_truth.sort_values(["country", "date"])
    sig = scenario.signals.sort_values(["country", "date"])
    curves = []
    for country, arrivals in truth.groupby("country").arrivals:
        x = sig.loc[sig.country == country, "intensity"].to_numpy(float)
        y = np.log(arrivals.to_numpy())
        n = len(x)
        curves.append([np.corrcoef(x[: n - k], y[k:])[0, 1] for k in range(31)])
    curve = np.mean(curves, axis=0)
    best = int(np.argmax(curve))
    assert abs(best - scenario.planted_signal_lead_days) <= 2
    assert curve[best] > curve[0] + 0.05  # the shift matters, not only the level
    assert stats["measured_signal_lead_days"] == best


# --- revisions ---------------------------------------------------------------------------------------


def test_revisions_move_by_a_few_percent_both_ways(scenario):
    final, first = scenario.flows.arrivals.to_numpy(), scenario.first_release.arrivals.to_numpy()
    assert first.dtype.kind == "i" and (first >= 0).all()
    pd.testing.assert_frame_equal(
        scenario.flows.drop(columns="arrivals"), scenario.first_release.drop(columns="arrivals")
    )
    big = final >= 50
    rel = np.abs(final[big] - first[big]) / final[big]
    assert 0.01 < rel.mean() < 0.08
    assert (final[big] > first[big]).mean() > 0.2 and (final[big] < first[big]).mean() > 0.1
    assert (final != first).any() and (final == first).any()


# --- written files obey the contract -----------------------------------------------------------------


def _check_contract(path: Path, published: date | None) -> pd.DataFrame:
    kind = _kind(path)
    frame = _read(path)
    history = "published_on" in frame.columns
    assert [c for c in frame.columns if c != "published_on"] == COLUMNS[kind], path.name
    key = KEYS[kind] + (["published_on"] if history else [])
    assert not frame.duplicated(key).any(), f"{path.name}: duplicate keys"
    pubs = (
        pd.to_datetime(frame.published_on)
        if history
        else pd.Series(pd.Timestamp(published), index=frame.index)
    )
    if "month" in frame:
        assert frame.month.str.fullmatch(r"\d{4}-(?:0[1-9]|1[0-2])").all()
        month_end = pd.to_datetime(frame.month + "-01") + pd.offsets.MonthEnd(0)
        assert (month_end < pubs).all(), f"{path.name}: a month after its publication date"
    if "date" in frame:
        assert (pd.to_datetime(frame.date, format="%Y-%m-%d") < pubs).all()
        assert frame.intensity.between(0, 100).all()
    for col in ("origin", "destination", "country"):
        if col in frame:
            assert frame[col].map(lambda c: bool(USER_ASSIGNED.match(c))).all()
    if kind == "flows":
        assert frame.arrivals.dtype.kind == "i" and (frame.arrivals >= 0).all()
    if kind == "dyad_attributes":
        assert (frame.distance_km > 0).all()
        assert frame[["contiguous", "common_language", "colonial_tie"]].isin([0, 1]).all().all()
    return frame


@pytest.mark.parametrize("fmt", ["csv", "parquet"])
def test_monthly_drop_obeys_the_contract(scenario, tmp_path, fmt):
    paths = write_monthly_drop(scenario, "2025-01", tmp_path, fmt, include_static=True)
    assert publication_date("2025-01") == date(2025, 2, 10)
    assert sorted(_kind(p) for p in paths) == sorted(KINDS)
    assert sorted(p.name for p in tmp_path.iterdir()) == sorted(p.name for p in paths)  # no staging left over
    assert not list(tmp_path.parent.glob(".dyadcast-drop-*"))
    for path in paths:
        match = SUFFIX.match(path.name)
        assert match and match["date"] == "2025-02-10", path.name
        frame = _check_contract(path, date(2025, 2, 10))
        if _kind(path) == "flows":
            assert set(frame.month) == {"2024-12", "2025-01"}
            destinations = set(scenario.dyad_attributes.destination)
            for month, part in frame.groupby("month"):
                assert set(part.destination) == destinations, f"{month}: every destination-month is reported"
            version = {"2024-12": scenario.flows, "2025-01": scenario.first_release}
            for month, truth in version.items():
                expect = (
                    truth[(truth.month == month) & (truth.arrivals > 0)].set_index(KEYS["flows"]).arrivals
                )
                got = frame[(frame.month == month) & (frame.arrivals > 0)].set_index(KEYS["flows"]).arrivals
                pd.testing.assert_series_equal(got.sort_index(), expect.sort_index(), check_dtype=False)
        if _kind(path) == "signals":
            assert frame.date.str.startswith("2025-01").all() and len(frame) == 31 * 12


def test_monthly_drop_leaves_out_static_attributes_by_default(scenario, tmp_path):
    paths = write_monthly_drop(scenario, "2017-01", tmp_path)
    assert "dyad_attributes" not in {_kind(p) for p in paths}
    flows = _read(next(p for p in paths if _kind(p) == "flows"))
    assert set(flows.month) == {"2017-01"}  # nothing to revise before the first month
    with pytest.raises(ValueError, match="outside the scenario"):
        write_monthly_drop(scenario, "2026-01", tmp_path)


def _state(rows: pd.DataFrame, as_of: str, dyads: pd.DataFrame) -> pd.DataFrame:
    """The vintage rule of the drop contract, written out independently of the ingest stage."""
    seen = rows[rows.published_on <= as_of]
    latest = seen.groupby(["destination", "month"]).published_on.transform("max")
    seen = seen[seen.published_on == latest]
    cells = seen[["destination", "month"]].drop_duplicates()
    full = cells.merge(dyads[["origin", "destination"]], on="destination")
    full = full.merge(seen[["origin", "destination", "month", "arrivals"]], how="left")
    return full.fillna({"arrivals": 0}).astype({"arrivals": "int64"})


def test_history_drop_rebuilds_first_release_and_revision(scenario, tmp_path):
    paths = write_history_drop(scenario, "2018-06", tmp_path, "csv")
    assert sorted(_kind(p) for p in paths) == sorted(KINDS)
    frames = {_kind(p): _check_contract(p, None) for p in paths}
    flows = frames["flows"]
    assert flows.month.max() == "2018-06" and flows.published_on.max() == "2018-07-10"
    dyads = scenario.dyad_attributes
    state = _state(flows, "2018-07-10", dyads).set_index(KEYS["flows"]).arrivals.sort_index()
    truth = (
        pd.concat(
            [
                scenario.flows[scenario.flows.month < "2018-06"],
                scenario.first_release[scenario.first_release.month == "2018-06"],
            ]
        )
        .set_index(KEYS["flows"])
        .arrivals.sort_index()
    )
    pd.testing.assert_series_equal(state, truth.loc[state.index])
    assert len(state) == len(truth)  # every dyad-month is reported, none missing
    firsts = _state(flows, "2017-02-10", dyads)  # as published on the first day
    assert set(firsts.month) == {"2017-01"}
    sig = frames["signals"]
    assert (
        sig.date.max() == "2018-06-30"
        and (sig.published_on == sig.date.str[:7].map(lambda m: publication_date(m).isoformat())).all()
    )
    assert frames["dyad_attributes"].published_on.nunique() == 1


def test_history_plus_monthly_equals_longer_history(scenario, tmp_path):
    short = write_history_drop(scenario, "2019-11", tmp_path / "a")
    monthly = write_monthly_drop(scenario, "2019-12", tmp_path / "a")
    longer = write_history_drop(scenario, "2019-12", tmp_path / "b")
    for kind in ("flows", "origin_indicators", "signals"):
        a = _read(next(p for p in short if _kind(p) == kind))
        m = _read(next(p for p in monthly if _kind(p) == kind)).assign(published_on="2020-01-10")
        b = _read(next(p for p in longer if _kind(p) == kind))
        combined = pd.concat([a, m], ignore_index=True)
        key = KEYS[kind] + ["published_on"]
        pd.testing.assert_frame_equal(
            combined.sort_values(key, ignore_index=True),
            b.sort_values(key, ignore_index=True),
            check_dtype=False,
        )


def test_committed_demo_data_matches_the_generator(scenario, tmp_path):
    written = write_examples(scenario, tmp_path)
    committed = REPO / "demo_data"
    assert (committed / "README.md").is_file()
    assert sum(p.stat().st_size for p in committed.iterdir()) < 300_000
    for path in written:
        assert (committed / path.name).read_bytes() == path.read_bytes(), (
            f"demo_data/{path.name} is stale: regenerate it with "
            "`python -m dyadcast.demo.scenario --write-examples demo_data`"
        )


def test_module_entry_point_writes_examples(tmp_path):
    out = subprocess.run(
        [sys.executable, "-m", "dyadcast.demo.scenario", "--write-examples", str(tmp_path / "ex")],
        capture_output=True,
        text=True,
        check=True,
        timeout=120,
    )
    assert "flows_2025-02-10.csv" in out.stdout
    assert len(list((tmp_path / "ex").glob("*.csv"))) == 5
