"""The invented demo scenario: a fictional region whose monthly drops exercise every stage of dyadcast.

`generate_scenario` is deterministic for a seed (independent numpy streams per component, so changing one
part does not reshuffle the others). The stylized facts it plants (common practice, no source): >80 % of
dyad-months zero, small positive flows, a few crises with bursts of tens of thousands that fade, distance
decay and contiguity, seasonality, conflict that rises before bursts, a search signal that leads arrivals by
about 9 days, and first releases revised by a few percent.

Regenerate the committed examples with `python -m dyadcast.demo.scenario --write-examples demo_data`.
"""

from __future__ import annotations

import argparse
from dataclasses import dataclass, field
from datetime import timedelta
from pathlib import Path

import numpy as np
import pandas as pd

from dyadcast.demo import dynamics
from dyadcast.demo.geography import Region, build_region
from dyadcast.months import add_months, format_month, month_range, parse_month

GROUP_SIZE_MEAN = 12.0  # people register in family or travel groups (common practice, no source)
SUPPRESS_BELOW = 5  # published counts 1-4 are shown as 0 to protect individuals (common practice, no source)
SIGNAL_NAME = "search_intensity"


@dataclass
class Scenario:
    """Frames in the drop-contract shape plus the truth that tests and the README need."""

    flows: (
        pd.DataFrame
    )  # every dyad-month, zeros included: origin, destination, month (YYYY-MM), arrivals (final)
    first_release: pd.DataFrame  # same rows: arrivals as first published (revised one month later)
    origin_indicators: pd.DataFrame  # country, month, indicator, value
    destination_indicators: pd.DataFrame  # country, month, indicator, value
    dyad_attributes: (
        pd.DataFrame
    )  # origin, destination, distance_km, contiguous, common_language, colonial_tie, diaspora
    signals: pd.DataFrame  # country, date (YYYY-MM-DD), signal, intensity
    planted_signal_lead_days: float
    crises: list[dict]
    coordinates: pd.DataFrame = field(default_factory=pd.DataFrame)  # country, lat, lon, role
    daily_truth: pd.DataFrame = field(
        default_factory=pd.DataFrame
    )  # country, date, pressure, arrivals (expected)
    seed: int = 0
    start: str = ""
    end: str = ""


def generate_scenario(
    seed: int = 7, start: str = "2017-01", end: str = "2025-12", n_origins: int = 12, n_destinations: int = 30
) -> Scenario:
    """Build the whole scenario in memory (a fraction of a second, well under 100 MB)."""
    first, last = parse_month(start), parse_month(end)
    if last < add_months(first, 23):
        raise ValueError(f"start={start}, end={end}: the scenario needs at least 24 months to place crises")
    streams = [np.random.default_rng(s) for s in np.random.SeedSequence(seed).spawn(8)]
    region = build_region(streams[0], n_origins, n_destinations)
    months = month_range(first, last)
    sim_start = first - timedelta(days=dynamics.BURN_IN_DAYS)
    sim_end = add_months(last, 1) - timedelta(days=1)
    sim_days = pd.date_range(sim_start, sim_end, freq="D")
    start_idx = dynamics.BURN_IN_DAYS
    crises = dynamics.plan_crises(
        streams[1], n_origins, first_day=start_idx + 365, last_day=len(sim_days) - 120
    )
    paths = dynamics.simulate_daily(streams[2], sim_days.day_of_year.to_numpy(), crises, n_origins)
    intensity = dynamics.search_intensity(streams[3], paths)

    days = sim_days[start_idx:]
    month_of_day = (days.year - first.year) * 12 + days.month - first.month  # 0 .. n_months-1
    monthly_arrivals = _sum_by_month(paths.arrivals[:, start_idx:], month_of_day.to_numpy(), len(months))
    conflict = _mean_by_month(paths.conflict[:, start_idx:], month_of_day.to_numpy(), len(months))
    latent = _mean_by_month(paths.latent[:, start_idx:], month_of_day.to_numpy(), len(months))

    month_labels = [format_month(m) for m in months]
    dest_ind, pull = _destination_indicators(streams[4], region.destinations, month_labels)
    final = _monthly_flows(streams[5], region, monthly_arrivals, pull, month_labels)
    first_release = _first_release(streams[6], final)
    origin_ind = _origin_indicators(streams[7], region.origins, month_labels, conflict, latent)

    date_labels = days.strftime("%Y-%m-%d")
    signals = pd.DataFrame(
        {
            "country": np.repeat(region.origins, len(days)),
            "date": np.tile(date_labels, n_origins),
            "signal": SIGNAL_NAME,
            "intensity": intensity[:, start_idx:].ravel(),
        }
    )
    daily_truth = pd.DataFrame(
        {
            "country": np.repeat(region.origins, len(days)),
            "date": np.tile(days.to_numpy(), n_origins),
            "pressure": paths.pressure[:, start_idx:].ravel(),
            "arrivals": paths.arrivals[:, start_idx:].ravel(),
        }
    )
    return Scenario(
        flows=final,
        first_release=first_release,
        origin_indicators=origin_ind,
        destination_indicators=dest_ind,
        dyad_attributes=region.dyads,
        signals=signals,
        planted_signal_lead_days=float(dynamics.DELAY_MEAN_DAYS),
        crises=_describe_crises(crises, region.origins, sim_days, final),
        coordinates=region.coordinates,
        daily_truth=daily_truth,
        seed=seed,
        start=start,
        end=end,
    )


def _sum_by_month(values: np.ndarray, month_of_day: np.ndarray, n_months: int) -> np.ndarray:
    out = np.zeros((values.shape[0], n_months))
    for i in range(values.shape[0]):
        out[i] = np.bincount(month_of_day, weights=values[i], minlength=n_months)
    return out


def _mean_by_month(values: np.ndarray, month_of_day: np.ndarray, n_months: int) -> np.ndarray:
    return _sum_by_month(values, month_of_day, n_months) / np.bincount(month_of_day, minlength=n_months)


def _monthly_flows(
    rng: np.random.Generator,
    region: Region,
    monthly_arrivals: np.ndarray,
    pull: np.ndarray,
    month_labels: list[str],
) -> pd.DataFrame:
    """Split each origin's monthly arrivals over destinations by a gravity share, then draw group counts."""
    dy = region.dyads
    o_idx = pd.Index(region.origins).get_indexer(dy.origin)
    d_idx = pd.Index(region.destinations).get_indexer(dy.destination)
    gravity = (
        -1.9 * np.log(dy.distance_km.to_numpy() / 500.0)
        + 1.3 * dy.contiguous.to_numpy()
        + 0.4 * dy.common_language.to_numpy()
        + 0.5 * dy.colonial_tie.to_numpy()
        + 0.15 * np.log1p(dy.diaspora.to_numpy())
        + rng.normal(0.0, 0.8, len(dy))
    )
    # About a third of distant pairs have no established route: flows there are rare.
    no_route = (rng.random(len(dy)) < 0.35) & (dy.contiguous.to_numpy() == 0)
    gravity = gravity - 2.5 * no_route
    log_w = gravity[:, None] + pull[d_idx, :]  # dyads x months
    w = np.exp(log_w - log_w.max())
    totals = np.zeros((len(region.origins), w.shape[1]))
    np.add.at(totals, o_idx, w)
    share = w / totals[o_idx]
    mu = monthly_arrivals[o_idx] * share * np.exp(rng.normal(0.0, 0.25, share.shape))
    groups = rng.poisson(mu / GROUP_SIZE_MEAN)
    # Group sizes: 1 + a gamma-Poisson extra, mean GROUP_SIZE_MEAN per group.
    extra = rng.poisson(rng.gamma(groups * 2.0, (GROUP_SIZE_MEAN - 1) / 2.0))
    arrivals = _suppress(np.where(groups > 0, groups + extra, 0))
    return pd.DataFrame(
        {
            "origin": np.repeat(dy.origin.to_numpy(), len(month_labels)),
            "destination": np.repeat(dy.destination.to_numpy(), len(month_labels)),
            "month": np.tile(month_labels, len(dy)),
            "arrivals": arrivals.ravel(),
        }
    )


def _first_release(rng: np.random.Generator, final: pd.DataFrame) -> pd.DataFrame:
    """First releases miss late registrations (about 2 % low on average) and some are corrected down."""
    f = final.arrivals.to_numpy()
    factor = 1.0 - rng.normal(0.015, 0.04, len(f))
    return final.assign(arrivals=_suppress(np.round(f * factor)))


def _suppress(counts: np.ndarray) -> np.ndarray:
    return np.where(counts >= SUPPRESS_BELOW, counts, 0).astype("int64")


def _origin_indicators(
    rng: np.random.Generator, origins: list[str], months: list[str], conflict: np.ndarray, latent: np.ndarray
) -> pd.DataFrame:
    """Push indicators: conflict follows the (leading) conflict path, the economy falls during crises."""
    n_o, n_m = conflict.shape
    base_events = rng.uniform(3, 40, n_o)[:, None]
    events = rng.poisson(base_events * np.exp(0.6 * latent) * (1.0 + 1.5 * conflict))
    lethality = rng.uniform(0.4, 2.5, n_o)[:, None]
    fatalities = rng.negative_binomial(6.0, 6.0 / (6.0 + events * lethality + 1e-9))
    drift = np.cumsum(rng.normal(0.0, 0.08, (n_o, n_m)), axis=1)
    instability = 10.0 / (
        1.0
        + np.exp(
            -(-1.2 + rng.normal(0, 0.6, (n_o, 1)) + drift + 0.5 * conflict + rng.normal(0, 0.15, (n_o, n_m)))
        )
    )
    growth = rng.normal(3.0, 1.5, (n_o, 1)) + np.cumsum(rng.normal(0, 0.2, (n_o, n_m)), axis=1) * 0.5
    gdp_growth = growth - 1.2 * conflict + rng.normal(0, 0.4, (n_o, n_m))
    values = {
        "conflict_events": events,
        "conflict_fatalities": fatalities,
        "instability_index": np.round(instability, 2),
        "gdp_growth": np.round(gdp_growth, 2),
    }
    return _long_indicators(origins, months, values)


def _destination_indicators(
    rng: np.random.Generator, destinations: list[str], months: list[str]
) -> tuple[pd.DataFrame, np.ndarray]:
    """Pull indicators and their effect on the gravity share (log scale, destinations x months)."""
    n_d, n_m = len(destinations), len(months)
    logit = np.log(rng.beta(4, 5, (n_d, 1)) / 0.56) + np.cumsum(rng.normal(0, 0.05, (n_d, n_m)), axis=1)
    recognition = 1.0 / (1.0 + np.exp(-logit))
    steps = np.where(rng.random((n_d, n_m)) < 0.02, rng.normal(0, 1.5, (n_d, n_m)), 0.0)
    openness = np.clip(rng.uniform(2, 8, (n_d, 1)) + np.cumsum(steps, axis=1), 0, 10)
    values = {"recognition_rate": np.round(recognition, 3), "policy_openness": np.round(openness, 1)}
    pull = 1.5 * (values["recognition_rate"] - 0.45) + 0.12 * (values["policy_openness"] - 5.0)
    return _long_indicators(destinations, months, values), pull


def _long_indicators(countries: list[str], months: list[str], values: dict[str, np.ndarray]) -> pd.DataFrame:
    parts = [
        pd.DataFrame(
            {
                "country": np.repeat(countries, len(months)),
                "month": np.tile(months, len(countries)),
                "indicator": name,
                "value": arr.astype("float64").ravel(),
            }
        )
        for name, arr in values.items()
    ]
    return pd.concat(parts, ignore_index=True).sort_values(
        ["country", "month", "indicator"], ignore_index=True
    )


def _describe_crises(
    crises: list[dynamics.Crisis], origins: list[str], sim_days: pd.DatetimeIndex, final: pd.DataFrame
) -> list[dict]:
    """Realized size of each planted crisis, measured on the final monthly flows."""
    out = []
    for c in sorted(crises, key=lambda c: c.start_day):
        origin = origins[c.origin_index]
        start = sim_days[c.start_day]
        start_month = f"{start.year:04d}-{start.month:02d}"
        mine = final[(final.origin == origin) & (final.month >= start_month)]
        totals = mine.groupby("month").arrivals.sum()
        peak_month = str(totals.idxmax())
        top = mine[mine.month == peak_month].nlargest(1, "arrivals").iloc[0]
        out.append(
            {
                "origin": origin,
                "start_date": start.strftime("%Y-%m-%d"),
                "start_month": start_month,
                "peak_month": peak_month,
                "peak_size": int(totals.max()),
                "peak_destination": str(top.destination),
                "peak_dyad_arrivals": int(top.arrivals),
                "conflict_lead_days": c.conflict_lead_days,
                "half_life_days": round(c.half_life_days, 1),
            }
        )
    return out


def scenario_stats(s: Scenario) -> dict:
    """Measured stylized facts, for the README, the lead's report and tests."""
    from dyadcast.demo.stats import measure

    return measure(s)


def _main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(
        prog="python -m dyadcast.demo.scenario", description=__doc__.splitlines()[0]
    )
    parser.add_argument("--seed", type=int, default=7)
    parser.add_argument(
        "--write-examples",
        metavar="DIR",
        type=Path,
        help="write the committed example drop (demo_data/) into DIR",
    )
    parser.add_argument("--stats", action="store_true", help="print the measured stylized facts")
    args = parser.parse_args(argv)
    scenario = generate_scenario(seed=args.seed)
    if args.write_examples:
        from dyadcast.demo.drops import write_examples

        for path in write_examples(scenario, args.write_examples):
            print(path)
    if args.stats or not args.write_examples:
        import json

        print(json.dumps(scenario_stats(scenario), indent=2, default=str))


if __name__ == "__main__":
    _main()
