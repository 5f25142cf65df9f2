"""Invented daily pressure -> arrivals with a travel delay, and a noisy 0-100 signal of the pressure."""

from __future__ import annotations

from datetime import date, timedelta

import numpy as np
import pandas as pd

# User-assigned ISO 3166-1 alpha-3 ranges only (QMA-QZZ, XAA-XZZ).
ORIGINS = [f"Q{chr(77 + i // 26)}{chr(65 + i % 26)}" for i in range(60)]


def planted_lead(
    n_origins: int = 24, first: date = date(2019, 1, 1), n_days: int = 6 * 365, lead: float = 9.0,
    lead_sd: float = 3.0, seed: int = 7,
) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Daily signal rows (country, date, intensity) and monthly outflow rows (origin, month, arrivals).

    Departures on day d follow a latent AR(1) pressure with bursts; each traveller arrives after a delay
    drawn from a Normal(lead, lead_sd) discretized to 0-29 whole days. The signal is a clipped linear index of log pressure on the
    departure day plus noise, so it leads arrivals by about `lead` days.
    """
    rng = np.random.default_rng(seed)
    pad = 60
    total = n_days + pad
    latent = np.zeros((n_origins, total))
    shocks = rng.normal(0.0, 0.25, size=(n_origins, total))
    bursts = (rng.random((n_origins, total)) < 4 / 365) * rng.exponential(0.8, size=(n_origins, total))
    for d in range(1, total):
        latent[:, d] = 0.93 * latent[:, d - 1] + shocks[:, d] + bursts[:, d]
    base = rng.uniform(3.0, 40.0, size=(n_origins, 1))
    departures = rng.poisson(base * np.exp(latent))
    arrivals = np.zeros_like(departures)
    delays = np.arange(0, 30)
    kernel = np.exp(-0.5 * ((delays - lead) / lead_sd) ** 2)
    kernel /= kernel.sum()
    for c in range(n_origins):
        split = rng.multinomial(departures[c], kernel)  # (days, delays)
        for k in delays:
            arrivals[c, k:] += split[: total - k, k]
    intensity = np.clip(30.0 + 15.0 * latent + rng.normal(0.0, 5.0, latent.shape), 0, 100)
    days = pd.date_range(first - timedelta(days=pad), periods=total, freq="D")
    countries = ORIGINS[:n_origins]
    keep = slice(pad, total)
    signal = pd.DataFrame({
        "country": np.repeat(countries, n_days),
        "date": np.tile(days[keep].date, n_origins),
        "intensity": intensity[:, keep].ravel(),
    })
    daily = pd.DataFrame(arrivals[:, keep].T, index=days[keep], columns=countries)
    monthly = daily.resample("MS").sum().stack().rename("arrivals").reset_index()
    monthly.columns = ["month", "origin", "arrivals"]
    return signal, monthly[["origin", "month", "arrivals"]]
