"""Forecast measures as pure, vectorised numpy functions (one value per forecast row unless named mean_*).

Conventions used across the accuracy log:
- the point forecast is the predictive mean (it is what totals add up to and what the count models
  estimate), so errors, bias and MASE use the mean; the median enters through the WIS;
- intervals are closed: y is covered when lower <= y <= upper (counts sit exactly on quantiles often);
- the interval score and WIS follow Gneiting & Raftery (2007) and Bracher, Ray, Gneiting & Reich (2021,
  PLOS Comput. Biol. 17(2): e1008618);
- MASE follows Hyndman & Koehler (2006) with the one-step persistence scale pooled over series (see
  `pooled_naive_scale`), because a single dyad is often all zeros and its own scale would be 0.
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np
import numpy.typing as npt

ArrayLike = npt.ArrayLike

# Floor for the predictive mean inside the Poisson and Tweedie deviances. A mean of exactly 0 (persistence
# after a zero month) makes the deviance infinite when any arrival happens; 0.1 of a person is effectively
# zero, keeps the penalty finite (y = 1 against 0 costs 2(ln 10 - 0.9) = 2.81 in Poisson deviance) and is
# the floor used in the project's model notes, so figures stay comparable. It also flattens differences
# between means below 0.1 at y = 0 (each costs 2 * 0.1 = 0.2): report deviance together with the floor.
DEVIANCE_FLOOR = 0.1
TWEEDIE_POWER = 1.5
# Central intervals scored, as (miscoverage alpha, lower quantile column, upper quantile column).
INTERVALS: tuple[tuple[float, str, str], ...] = ((0.5, "q250", "q750"), (0.1, "q050", "q950"))
MEDIAN_COLUMN = "q500"
# A forecast "says arrivals > 0" when P(arrivals > 0) is at least this: the decision that minimises
# expected misclassification with equal costs (common practice, no source).
POSITIVE_THRESHOLD = 0.5


def _f(values: ArrayLike) -> np.ndarray:
    return np.asarray(values, dtype=float)


def absolute_error(y: ArrayLike, point: ArrayLike) -> np.ndarray:
    return np.abs(_f(point) - _f(y))


def squared_error(y: ArrayLike, point: ArrayLike) -> np.ndarray:
    return (_f(point) - _f(y)) ** 2


def error(y: ArrayLike, point: ArrayLike) -> np.ndarray:
    """Forecast minus actual: positive means over-forecast, so its mean is the bias."""
    return _f(point) - _f(y)


def poisson_deviance(y: ArrayLike, mu: ArrayLike, floor: float = DEVIANCE_FLOOR) -> np.ndarray:
    """Unit Poisson deviance 2 (y ln(y/mu) - (y - mu)), with mu floored (see DEVIANCE_FLOOR)."""
    y, mu = _f(y), np.maximum(_f(mu), floor)
    with np.errstate(divide="ignore", invalid="ignore"):
        ylogy = np.where(y > 0, y * np.log(np.where(y > 0, y, 1.0) / mu), 0.0)
    return 2.0 * (ylogy - (y - mu))


def tweedie_deviance(
    y: ArrayLike, mu: ArrayLike, power: float = TWEEDIE_POWER, floor: float = DEVIANCE_FLOOR
) -> np.ndarray:
    """Unit Tweedie deviance for 1 < power < 2 (compound Poisson-gamma), mu floored as for Poisson."""
    if not 1.0 < power < 2.0:
        raise ValueError(f"tweedie power {power}: use a value strictly between 1 and 2 (1.5 is the default)")
    y, mu = _f(y), np.maximum(_f(mu), floor)
    p = power
    return 2.0 * (
        np.power(y, 2 - p) / ((1 - p) * (2 - p)) - y * np.power(mu, 1 - p) / (1 - p) + np.power(mu, 2 - p) / (2 - p)
    )


def covered(y: ArrayLike, lower: ArrayLike, upper: ArrayLike) -> np.ndarray:
    y = _f(y)
    return (_f(lower) <= y) & (y <= _f(upper))


def interval_score(y: ArrayLike, lower: ArrayLike, upper: ArrayLike, alpha: float) -> np.ndarray:
    """IS_alpha = (u - l) + (2/alpha)(l - y)_+ + (2/alpha)(y - u)_+ for the central (1 - alpha) interval."""
    y, lower, upper = _f(y), _f(lower), _f(upper)
    return (upper - lower) + (2.0 / alpha) * np.maximum(lower - y, 0.0) + (2.0 / alpha) * np.maximum(y - upper, 0.0)


class WISParts(NamedTuple):
    wis: np.ndarray
    dispersion: np.ndarray
    overprediction: np.ndarray
    underprediction: np.ndarray


def weighted_interval_score(
    y: ArrayLike,
    median: ArrayLike,
    lower: ArrayLike,
    upper: ArrayLike,
    alphas: ArrayLike,
    w_median: float = 0.5,
) -> WISParts:
    """WIS = (w0 |y - m| + sum_k (alpha_k/2) IS_alpha_k) / (K + 1/2) and its three additive parts.

    `lower` and `upper` have shape (n, K), one column per interval with miscoverage `alphas[k]`.
    Dispersion is the width term; over- and under-prediction collect the median's absolute error and the
    interval penalties on the side where the actual fell (Bracher et al. 2021, Section 2.2).
    """
    y, median = _f(y), _f(median)
    lower, upper, alphas = np.atleast_2d(_f(lower)), np.atleast_2d(_f(upper)), _f(alphas)
    if lower.shape != upper.shape or lower.shape[-1] != alphas.size:
        raise ValueError(
            f"lower {lower.shape} and upper {upper.shape} must both be (n, K) with K = len(alphas) = {alphas.size}"
        )
    norm = alphas.size + 0.5
    yk = y[:, None]
    dispersion = (alphas / 2.0 * (upper - lower)).sum(axis=1)
    over = w_median * np.maximum(median - y, 0.0) + np.maximum(lower - yk, 0.0).sum(axis=1)
    under = w_median * np.maximum(y - median, 0.0) + np.maximum(yk - upper, 0.0).sum(axis=1)
    parts = (dispersion / norm, over / norm, under / norm)
    return WISParts(parts[0] + parts[1] + parts[2], *parts)


def wis_from_quantiles(y: ArrayLike, quantiles: dict[str, ArrayLike]) -> WISParts:
    """WIS over the project's standard columns (q050 ... q950) given as a mapping or DataFrame."""
    lower = np.column_stack([_f(quantiles[lo]) for _, lo, _ in INTERVALS])
    upper = np.column_stack([_f(quantiles[hi]) for _, _, hi in INTERVALS])
    alphas = np.array([a for a, _, _ in INTERVALS])
    return weighted_interval_score(y, quantiles[MEDIAN_COLUMN], lower, upper, alphas)


def predicted_positive(p_positive: ArrayLike, threshold: float = POSITIVE_THRESHOLD) -> np.ndarray:
    return _f(p_positive) >= threshold


def precision_recall(predicted: ArrayLike, actual: ArrayLike) -> tuple[float, float]:
    """Precision and recall of "arrivals > 0"; NaN when undefined (nothing predicted / nothing happened)."""
    predicted, actual = np.asarray(predicted, dtype=bool), np.asarray(actual, dtype=bool)
    tp = float(np.sum(predicted & actual))
    n_pred, n_act = float(predicted.sum()), float(actual.sum())
    return (tp / n_pred if n_pred else float("nan"), tp / n_act if n_act else float("nan"))


def pooled_naive_scales(
    groups: ArrayLike, series_ids: ArrayLike, month_index: ArrayLike, values: ArrayLike, n_groups: int
) -> tuple[np.ndarray, np.ndarray]:
    """Per group g = 0..n_groups-1: mean |y_t - y_{t-1}| over its series' pairs of consecutive months.

    Hyndman & Koehler (2006) scale each series by its own in-sample one-step naive MAE. Most dyads are all
    zeros, so that scale is 0 and MASE infinite; pooling the absolute differences over all series of a
    group (a run's dyads, or its origin totals, ...) keeps one finite, comparable denominator. Returns
    (scales, pair counts); a scale is NaN when its group has no pair or every difference is 0 (MASE is then
    undefined, stored as NULL). `series_ids` must be unique across groups (one series in one group).
    """
    g = np.asarray(groups, dtype=np.int64)
    ids, t, v = np.asarray(series_ids), np.asarray(month_index, dtype=np.int64), _f(values)
    scales, pairs = np.full(n_groups, np.nan), np.zeros(n_groups, dtype=np.int64)
    if ids.size < 2:
        return scales, pairs
    order = np.lexsort((t, ids))
    g, ids, t, v = g[order], ids[order], t[order], v[order]
    consecutive = (ids[1:] == ids[:-1]) & (t[1:] - t[:-1] == 1)
    diffs = np.abs(np.diff(v))[consecutive]
    owner = g[1:][consecutive]
    pairs = np.bincount(owner, minlength=n_groups).astype(np.int64)
    sums = np.bincount(owner, weights=diffs, minlength=n_groups)
    with np.errstate(invalid="ignore", divide="ignore"):
        scales = np.where((pairs > 0) & (sums > 0), sums / np.maximum(pairs, 1), np.nan)
    return scales, pairs


def pooled_naive_scale(series_ids: ArrayLike, month_index: ArrayLike, values: ArrayLike) -> tuple[float, int]:
    """`pooled_naive_scales` for a single group: (scale, number of pairs)."""
    ids = np.asarray(series_ids)
    scales, pairs = pooled_naive_scales(np.zeros(ids.size, dtype=np.int64), ids, month_index, values, 1)
    return float(scales[0]), int(pairs[0])
