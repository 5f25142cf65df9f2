"""Daily organic signals turned into one monthly feature per origin, with a lead and smoothing learnt from data.

A daily intensity moves before arrivals do (people travel for days before they are registered). For a lead
L and a window W (days), the smoothed signal on day d is s_d = mean(intensity[d-L-W+1 .. d-L]). L and W are
chosen on training data only (months <= cutoff, rows published by the as-of date) by how well the month-on-
month changes of the monthly mean of s_d follow those of log1p(origin outflow), correlated within origin so
that big and small origins weigh by their ups and downs, not by their size (see `correlation_grid`, `choose`).

The feature for anchor month t must be computable at the end of t. It is the mean of s_d over the days of
month t+1 whose s_d is already known then (d <= end(t) + L), i.e. the part of next month's arrivals that the
signal has already announced; with L = 0 it is s on the last day of t.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass
from datetime import date, timedelta

import duckdb
import numpy as np
import pandas as pd

from dyadcast.config import SignalConfig
from dyadcast.months import add_months

TOP_CANDIDATES = 10
MIN_CELLS = 24  # origin-months with a change below which the grid is noise (common practice, no source)


@dataclass(frozen=True)
class SignalChoice:
    """The lead and window kept for one signal, with the evidence for it (stored in forecast metadata)."""

    signal: str
    lag_days: int
    window_days: int
    correlation: float
    raw_correlation: float
    best_lag_days: int
    best_window_days: int
    best_correlation: float
    n_pairs: int
    n_origins: int
    rule: str
    top: list[dict]
    grid: dict[str, list[float]]

    def to_dict(self) -> dict:
        """JSON-ready: NaN becomes None so that strict JSON readers (DuckDB, browsers) accept the metadata."""
        return {k: None if isinstance(v, float) and np.isnan(v) else v for k, v in asdict(self).items()}


@dataclass(frozen=True)
class DailySeries:
    """One signal as a dense country x day array (NaN where a day has no value)."""

    countries: list[str]
    first_day: np.datetime64
    values: np.ndarray  # shape (n_countries, n_days)

    @property
    def n_days(self) -> int:
        return self.values.shape[1]

    def day_index(self, days: np.ndarray) -> np.ndarray:
        return (days.astype("datetime64[D]") - self.first_day).astype(np.int64)


def daily_series(frame: pd.DataFrame, last_day: date) -> DailySeries:
    """Dense array from long rows (country, date, intensity), days from the first row to `last_day`."""
    countries = sorted(frame["country"].unique())
    days = frame["date"].to_numpy().astype("datetime64[D]")
    first = days.min()
    n_days = int((np.datetime64(last_day, "D") - first).astype(np.int64)) + 1
    values = np.full((len(countries), max(n_days, 0)), np.nan)
    rows = pd.Categorical(frame["country"], categories=countries).codes
    cols = (days - first).astype(np.int64)
    keep = cols < values.shape[1]
    values[rows[keep], cols[keep]] = frame["intensity"].to_numpy(dtype=float)[keep]
    return DailySeries(countries, first, values)


def _prefix(values: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Prefix sums of values and of non-missing counts along the last axis, with a leading zero."""
    ok = ~np.isnan(values)
    pad = [(0, 0)] * (values.ndim - 1) + [(1, 0)]
    sums = np.pad(np.cumsum(np.where(ok, values, 0.0), axis=-1), pad)
    counts = np.pad(np.cumsum(ok, axis=-1), pad)
    return sums, counts


def _range_mean(sums: np.ndarray, counts: np.ndarray, lo: np.ndarray, hi: np.ndarray) -> np.ndarray:
    """Mean of the available values over inclusive day ranges [lo, hi] (clipped to the data); NaN if none."""
    n = sums.shape[-1] - 1
    lo_c = np.clip(lo, 0, n)
    hi_c = np.clip(hi + 1, 0, n)
    hi_c = np.maximum(hi_c, lo_c)
    total = np.take(sums, hi_c, axis=-1) - np.take(sums, lo_c, axis=-1)
    count = np.take(counts, hi_c, axis=-1) - np.take(counts, lo_c, axis=-1)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(count > 0, total / np.maximum(count, 1), np.nan)


def trailing_mean(series: DailySeries, window: int) -> np.ndarray:
    """m_W[c, j] = mean of the available intensities over days j-W+1 .. j."""
    sums, counts = _prefix(series.values)
    j = np.arange(series.n_days)
    return _range_mean(sums, counts, j - window + 1, j)


def month_day_bounds(series: DailySeries, months: list[date]) -> tuple[np.ndarray, np.ndarray]:
    """Index of the first and last day of each month in the series' day numbering."""
    starts = np.array(months, dtype="datetime64[D]")
    ends = np.array([add_months(m, 1) - timedelta(days=1) for m in months], dtype="datetime64[D]")
    return series.day_index(starts), series.day_index(ends)


def signal_feature(series: DailySeries, months: list[date], lag: int, window: int) -> np.ndarray:
    """Feature for anchor months t (country x month), using intensity days up to the end of t only."""
    smooth = trailing_mean(series, window)
    sums, counts = _prefix(smooth)
    _, last = month_day_bounds(series, months)
    next_first, next_last = month_day_bounds(series, [add_months(m, 1) for m in months])
    if lag == 0:
        lo = hi = last  # s on the last day of t
    else:
        lo = next_first - lag
        hi = np.minimum(last + lag, next_last) - lag
    return _range_mean(sums, counts, lo, hi)


def within_correlation(signal: np.ndarray, outcome: np.ndarray, mask: np.ndarray) -> np.ndarray:
    """Pooled within-origin Pearson correlation over the masked (origin, month) cells, per leading index."""
    weight = mask.astype(float)
    n_per_origin = np.maximum(weight.sum(axis=-1, keepdims=True), 1.0)
    y = np.where(mask, outcome, 0.0)
    y = (y - (y * weight).sum(axis=-1, keepdims=True) / n_per_origin) * weight
    s = np.where(mask, signal, 0.0)
    s = (s - (s * weight).sum(axis=-1, keepdims=True) / n_per_origin) * weight
    num = (s * y).sum(axis=(-2, -1))
    den = np.sqrt((s * s).sum(axis=(-2, -1)) * (y * y).sum(axis=(-2, -1)))
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(den > 0, num / den, np.nan)


def correlation_grid(
    series: DailySeries, outflow: np.ndarray, months: list[date], lags: list[int], windows: list[int]
) -> tuple[np.ndarray, int, int]:
    """Within-origin correlation of month-on-month changes of log1p(outflow) and of each candidate's signal.

    `outflow` is aligned with `series.countries` x `months` (NaN where unknown). Changes, not levels: the
    level of both series is dominated by slow swings that any lead matches about equally well (on the demo
    data the level correlation moved by 0.011 over leads of 0-15 days, the change correlation by 0.087);
    changes carry the timing. All candidates are
    scored on the same cells (those every candidate and the outflow define) so that they are comparable.
    Returns the grid (lags x windows), the number of cells and the number of origins used.
    """
    first, last = month_day_bounds(series, months)
    change = np.diff(np.log1p(outflow), axis=-1)
    mask = ~np.isnan(change)
    per_window = []
    for window in windows:  # one window at a time keeps memory at lags x origins x months
        sums, counts = _prefix(trailing_mean(series, window))
        monthly = np.stack([_range_mean(sums, counts, first - lag, last - lag) for lag in lags])
        signal_change = np.diff(monthly, axis=-1)  # lags x origins x (months - 1)
        mask &= ~np.isnan(signal_change).any(axis=0)
        per_window.append(signal_change)
    grid = np.column_stack([within_correlation(sc, change[None], mask[None]) for sc in per_window])
    n_origins = int((mask.sum(axis=1) > 1).sum())
    return grid, int(mask.sum()), n_origins


def choose(grid: np.ndarray, lags: list[int], windows: list[int]) -> tuple[int, int]:
    """Lead first, then smoothing: the best lag for the narrowest window, then the best window at that lag.

    Monthly sums blur the split between lead and smoothing: windows ending at different lags but centred on
    the same day score almost alike, so the overall maximum drifts along L + (W-1)/2 = const (on planted
    data it picked L = 0, W = 14 for a 9-day lead). Fixing the lead on the least-smoothed signal first keeps
    L the lead itself; the overall maximum is still reported as evidence.
    """
    narrow = int(np.argmin(windows))
    if np.all(np.isnan(grid[:, narrow])):
        raise ValueError("no candidate lag could be scored for the narrowest window")
    a = int(np.nanargmax(grid[:, narrow]))
    b = int(np.nanargmax(np.where(np.isnan(grid[a]), -np.inf, grid[a])))
    return lags[a], windows[b]


def _grid_json(grid: np.ndarray, lags: list[int], windows: list[int]) -> dict[str, list]:
    rows = [[None if np.isnan(v) else round(float(v), 6) for v in row] for row in grid]
    return {"lag_days": list(lags), "window_days": list(windows), "correlation": rows}


def choose_signal(
    name: str, series: DailySeries, outflow: np.ndarray, months: list[date], config: SignalConfig
) -> SignalChoice:
    """Score every candidate on the training months and keep one (see `choose`)."""
    lags = list(range(config.lag_days_min, config.lag_days_max + 1))
    windows = sorted(set(config.window_days))
    grid, n_pairs, n_origins = correlation_grid(series, outflow, months, [0, *lags], [1, *windows])
    raw = float(grid[0, 0])  # L = 0, W = 1: the signal as published
    grid = grid[1:, 1:]
    if n_pairs < MIN_CELLS or np.all(np.isnan(grid[:, 0])):
        lag, window = lags[0], windows[0]
        return SignalChoice(
            name, lag, window, float("nan"), raw, lag, window, float("nan"), n_pairs, n_origins,
            f"too little history ({n_pairs} origin-months with a change, need {MIN_CELLS}): "
            "smallest lag and window of the configuration",
            [], _grid_json(grid, lags, windows),
        )
    lag, window = choose(grid, lags, windows)
    a_best, b_best = np.unravel_index(np.nanargmax(grid), grid.shape)
    order = np.argsort(np.where(np.isnan(grid), -np.inf, grid), axis=None)[::-1][:TOP_CANDIDATES]
    top = [
        {"lag_days": lags[a], "window_days": windows[b], "correlation": round(float(grid[a, b]), 6)}
        for a, b in zip(*np.unravel_index(order, grid.shape), strict=True)
    ]
    return SignalChoice(
        signal=name,
        lag_days=lag,
        window_days=window,
        correlation=float(grid[lags.index(lag), windows.index(window)]),
        raw_correlation=raw,
        best_lag_days=lags[a_best],
        best_window_days=windows[b_best],
        best_correlation=float(grid[a_best, b_best]),
        n_pairs=n_pairs,
        n_origins=n_origins,
        rule="best lag for the narrowest window, then the best window at that lag",
        top=top,
        grid=_grid_json(grid, lags, windows),
    )


def validate_config(config: SignalConfig) -> None:
    if not 0 <= config.lag_days_min <= config.lag_days_max:
        raise ValueError(
            f"[signals] lag_days_min = {config.lag_days_min}, lag_days_max = {config.lag_days_max}: "
            "use 0 <= lag_days_min <= lag_days_max in dyadcast.toml"
        )
    if not config.window_days or min(config.window_days) < 1:
        raise ValueError(f"[signals] window_days = {list(config.window_days)}: list whole numbers of days >= 1")


def signal_features(
    con: duckdb.DuckDBPyConnection,
    as_of: date,
    cutoff: date,
    months: list[date],
    config: SignalConfig,
    origins: list[str],
    outflow: np.ndarray,
) -> tuple[pd.DataFrame, dict[str, dict]]:
    """Long frame (country, month, name, value) of `signal_<name>` for the anchor `months`, and the evidence.

    `outflow` (origins x months, NaN where unknown) is the training target of the choice: the caller's
    anchor months, so a training window limits the choice too. Only signal rows published by `as_of`, and
    days from the first one any candidate reads up to the end of the cutoff month, are read.
    """
    validate_config(config)
    end = add_months(cutoff, 1) - timedelta(days=1)
    # the earliest day any candidate reads: the first anchor month, less the longest lead and smoothing window
    begin = months[0] - timedelta(days=config.lag_days_max + max(config.window_days) + 1)
    daily = con.sql(
        "SELECT country, date, signal, intensity FROM signals_as_of(?) WHERE date BETWEEN ? AND ?",
        params=[as_of, begin, end],
    ).df()
    if daily.empty:
        return pd.DataFrame(columns=["country", "month", "name", "value"]), {}
    row_of = {c: i for i, c in enumerate(origins)}
    parts, evidence = [], {}
    for name, rows in daily.groupby("signal", sort=True):
        series = daily_series(rows, end)
        aligned = np.full((len(series.countries), len(months)), np.nan)
        known = [(i, row_of[c]) for i, c in enumerate(series.countries) if c in row_of]
        if known:
            mine, theirs = map(list, zip(*known, strict=True))
            aligned[mine] = outflow[theirs]
        choice = choose_signal(str(name), series, aligned, months, config)
        evidence[str(name)] = choice.to_dict()
        values = signal_feature(series, months, choice.lag_days, choice.window_days)
        parts.append(pd.DataFrame({
            "country": np.repeat(series.countries, len(months)),
            "month": np.tile(np.array(months, dtype="datetime64[D]"), len(series.countries)),
            "name": f"signal_{name}",
            "value": values.ravel(),
        }))
    return pd.concat(parts, ignore_index=True), evidence
