"""Daily dynamics of the demo: departure pressure per origin, crises, the travel delay and the search signal.

Arrivals are the pressure convolved with a travel-delay distribution, and the search signal is read off the
pressure on the departure day, so the signal leads arrivals by the delay's mean. Everything is a stylized
fact (common practice, no source); no parameter is estimated from real data.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import signal as sps
from scipy import stats

DELAY_MEAN_DAYS = 9.0
DELAY_SD_DAYS = 3.0
DELAY_MAX_DAYS = 30
BURN_IN_DAYS = 45  # pressure starts this early so the first month's arrivals are not truncated


@dataclass(frozen=True)
class Crisis:
    origin_index: int
    start_day: int  # index into the simulated day axis
    rise_days: float
    half_life_days: float
    peak_monthly: float  # planted origin outflow per month at the crisis peak (before seasonality and noise)
    conflict_lead_days: int  # conflict escalates this many days before departures start to surge


def delay_pmf(
    mean: float = DELAY_MEAN_DAYS, sd: float = DELAY_SD_DAYS, max_days: int = DELAY_MAX_DAYS
) -> np.ndarray:
    """Gamma travel delay discretized to whole days (mass on day j = F(j+0.5) - F(j-0.5)), normalized."""
    shape, scale = (mean / sd) ** 2, sd**2 / mean
    edges = np.arange(max_days + 2) - 0.5
    pmf = np.diff(stats.gamma.cdf(np.clip(edges, 0, None), shape, scale=scale))
    return pmf / pmf.sum()


def _ar1(rng: np.random.Generator, n_series: int, n_days: int, phi: float, sd: float) -> np.ndarray:
    """Stationary AR(1) rows with marginal standard deviation `sd` (lfilter keeps it vectorized)."""
    eps = rng.normal(0.0, sd * np.sqrt(1 - phi**2), size=(n_series, n_days))
    eps[:, 0] = rng.normal(0.0, sd, n_series)
    return sps.lfilter([1.0], [1.0, -phi], eps, axis=1)


def crisis_shape(days: np.ndarray, start_day: float, rise_days: float, half_life_days: float) -> np.ndarray:
    """0 before the start, a quadratic rise to 1 over `rise_days`, then exponential decay (the fade)."""
    tau = days - start_day
    rise = np.clip(tau / rise_days, 0.0, 1.0) ** 2
    decay = np.exp(-np.log(2) * np.clip(tau - rise_days, 0.0, None) / half_life_days)
    return np.where(tau < 0, 0.0, rise * decay)


def plan_crises(rng: np.random.Generator, n_origins: int, first_day: int, last_day: int) -> list[Crisis]:
    """2-4 crises at different origins, one per equal slice of [first_day, last_day] so they spread out."""
    n = int(rng.integers(2, 5))
    who = rng.choice(n_origins, size=min(n, n_origins), replace=False)
    edges = np.linspace(first_day, last_day, len(who) + 1)
    return [
        Crisis(
            origin_index=int(o),
            start_day=int(rng.uniform(edges[i], edges[i + 1] - 30)),
            rise_days=float(rng.uniform(25, 50)),
            half_life_days=float(rng.uniform(45, 100)),
            peak_monthly=float(rng.uniform(30_000, 90_000)),
            conflict_lead_days=int(rng.integers(35, 76)),
        )
        for i, o in enumerate(who)
    ]


@dataclass(frozen=True)
class DailyPaths:
    pressure: np.ndarray  # origins x days: expected departures per day
    arrivals: np.ndarray  # origins x days: expected arrivals per day (pressure convolved with the delay)
    conflict: np.ndarray  # origins x days: conflict intensity (crisis shape moved earlier, plus incidents)
    latent: np.ndarray  # origins x days: log deviation of pressure from its baseline (no crisis)
    baseline: np.ndarray  # origins: baseline departures per day


def simulate_daily(
    rng: np.random.Generator, day_of_year: np.ndarray, crises: list[Crisis], n_origins: int
) -> DailyPaths:
    """Log pressure = baseline + season + slow and fast noise + local incidents + crises."""
    n_days = len(day_of_year)
    days = np.arange(n_days)
    baseline = np.exp(rng.normal(np.log(120.0), 0.8, n_origins)) / 30.4
    amplitude = rng.uniform(0.15, 0.35, n_origins)[:, None]
    peak_day = (200 + rng.normal(0, 20, n_origins))[
        :, None
    ]  # departures peak mid-year (an invented dry season)
    season = amplitude * np.cos(2 * np.pi * (day_of_year[None, :] - peak_day) / 365.25)
    latent = season + _ar1(rng, n_origins, n_days, 0.98, 0.30) + _ar1(rng, n_origins, n_days, 0.6, 0.20)
    # Local incidents: a few a year per origin, a jump that fades with a one-week half-life.
    incidents = np.zeros((n_origins, n_days))
    hits = rng.random((n_origins, n_days)) < 4 / 365
    incidents[hits] = rng.uniform(0.5, 1.5, hits.sum())
    incidents = sps.lfilter([1.0], [1.0, -(0.5 ** (1 / 7))], incidents, axis=1)
    latent = latent + np.log1p(incidents)
    crisis_mult = np.ones((n_origins, n_days))
    conflict = incidents.copy()
    for c in crises:
        planted = c.peak_monthly / (30.4 * baseline[c.origin_index])
        crisis_mult[c.origin_index] += planted * crisis_shape(
            days, c.start_day, c.rise_days, c.half_life_days
        )
        # Fighting escalates within days, 35-75 days before departures surge, and outlasts the peak.
        conflict[c.origin_index] += 8.0 * crisis_shape(
            days, c.start_day - c.conflict_lead_days, 10.0, c.half_life_days + c.conflict_lead_days
        )
    pressure = baseline[:, None] * np.exp(latent) * crisis_mult
    arrivals = sps.lfilter(delay_pmf(), [1.0], pressure, axis=1)
    return DailyPaths(pressure, arrivals, conflict, latent, baseline)


def search_intensity(rng: np.random.Generator, paths: DailyPaths) -> np.ndarray:
    """A noisy 0-100 index of log pressure relative to baseline, on the departure day (integers)."""
    rel = np.log(paths.pressure / paths.baseline[:, None])
    raw = 22.0 + 17.0 * rel + rng.normal(0.0, 5.0, rel.shape)
    return np.clip(np.round(raw), 0, 100).astype("int64")
