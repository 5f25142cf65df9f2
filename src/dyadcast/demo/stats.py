"""Measure the stylized facts a scenario was built to show, so README figures and tests use the same code."""

from __future__ import annotations

from typing import TYPE_CHECKING

import numpy as np
import pandas as pd

if TYPE_CHECKING:
    from dyadcast.demo.scenario import Scenario


def lagged_correlations(signal: np.ndarray, target: np.ndarray, max_lag: int) -> np.ndarray:
    """corr(signal[t - k], target[t]) for k = 0..max_lag (positive k: the signal leads)."""
    n = len(signal)
    return np.array([np.corrcoef(signal[: n - k], target[k:])[0, 1] for k in range(max_lag + 1)])


def signal_lead_curve(s: Scenario, max_lag: int = 30) -> np.ndarray:
    """Mean over origins of the lagged correlation of the daily signal with log expected daily arrivals.

    Log arrivals, because the signal is an index of log pressure; the mean over origins keeps one quiet
    origin from deciding the peak.
    """
    curves = []
    truth = s.daily_truth.sort_values(["country", "date"])
    sig = s.signals.sort_values(["country", "date"])
    for country, arrivals in truth.groupby("country", sort=True).arrivals:
        intensity = sig.loc[sig.country == country, "intensity"].to_numpy(dtype=float)
        curves.append(lagged_correlations(intensity, np.log(arrivals.to_numpy()), max_lag))
    return np.mean(curves, axis=0)


def measure(s: Scenario) -> dict:
    flows = s.flows
    y = flows.arrivals.to_numpy()
    pos = y[y > 0]
    q = np.quantile(pos, [0.10, 0.25, 0.50, 0.75, 0.90, 0.99])
    per_dyad = flows.groupby(["origin", "destination"], as_index=False).arrivals.mean()
    per_dyad = per_dyad.merge(s.dyad_attributes, on=["origin", "destination"])
    positive = flows[flows.arrivals > 0].merge(s.dyad_attributes, on=["origin", "destination"])
    both = s.first_release.arrivals.to_numpy()
    revised = y > 0
    rel = np.abs(y[revised] - both[revised]) / y[revised]
    curve = signal_lead_curve(s)
    return {
        "seed": s.seed,
        "months": f"{s.start}..{s.end}",
        "n_origins": int(flows.origin.nunique()),
        "n_destinations": int(flows.destination.nunique()),
        "n_dyads": int(len(per_dyad)),
        "n_dyad_months": int(len(flows)),
        "zero_share": round(float((y == 0).mean()), 4),
        "positive_quantiles": {
            k: float(v) for k, v in zip(["q10", "q25", "q50", "q75", "q90", "q99"], q, strict=True)
        },
        "max": int(y.max()),
        "share_positive_10_to_500": round(float(((pos >= 10) & (pos <= 500)).mean()), 4),
        "corr_log_mean_flow_log_distance": round(
            float(np.corrcoef(np.log1p(per_dyad.arrivals), np.log(per_dyad.distance_km))[0, 1]), 3
        ),
        "corr_log_positive_flow_log_distance": round(
            float(np.corrcoef(np.log(positive.arrivals), np.log(positive.distance_km))[0, 1]), 3
        ),
        "mean_flow_contiguous": round(float(per_dyad.loc[per_dyad.contiguous == 1, "arrivals"].mean()), 1),
        "mean_flow_not_contiguous": round(
            float(per_dyad.loc[per_dyad.contiguous == 0, "arrivals"].mean()), 1
        ),
        "revision_median_abs_pct": round(100 * float(np.median(rel)), 2),
        "revision_mean_abs_pct": round(100 * float(np.mean(rel)), 2),
        "revision_share_up": round(float((y[revised] > both[revised]).mean()), 3),
        "revision_share_down": round(float((y[revised] < both[revised]).mean()), 3),
        "planted_signal_lead_days": s.planted_signal_lead_days,
        "measured_signal_lead_days": int(np.argmax(curve)),
        "signal_corr_at_lead": round(float(curve.max()), 3),
        "signal_corr_at_lag0": round(float(curve[0]), 3),
        "seasonality_peak_calendar_month": int(_seasonal_peak(flows)),
        "crises": s.crises,
    }


def _seasonal_peak(flows: pd.DataFrame) -> int:
    """Calendar month with the highest median (origins, years) of relative outflow: robust to crises."""
    totals = flows.groupby(["origin", "month"], as_index=False).arrivals.sum()
    totals["calendar_month"] = totals.month.str[5:7].astype(int)
    totals["rel"] = totals.arrivals / totals.groupby("origin").arrivals.transform("median").clip(lower=1)
    return int(totals.groupby("calendar_month").rel.median().idxmax())
