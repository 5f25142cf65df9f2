"""The scoring core: forecasts + actuals (pandas frames) -> accuracy rows. No warehouse, no files.

`score_frame` states the scoring rules on pandas frames; the scoring step (pending.py) applies the same rules
in the warehouse (sql/59_scoring_rows.sql, tested against `score_frame`) because joining a month's forecasts
to its actuals in pandas cost most of its time at scale. Both compute the values with `measures`. A dyad is scored once its (destination, month) is reported (a reported destination-month with
no row for the dyad is an implied zero, as in the flows contract). Totals are scored against the sum of
the actuals of the dyads the run forecast, and only when every (destination, month) the total spans was
reported; until then they wait, and are scored when the missing month arrives.
"""

from __future__ import annotations

import hashlib
from collections.abc import Iterable, Mapping
from datetime import UTC, datetime

import numpy as np
import pandas as pd

from dyadcast.scoring import metrics
from dyadcast.scoring.metrics import ArrayLike
from dyadcast.scoring.schema import ACCURACY_COLUMNS, LEVELS, QUANTILE_COLUMNS, VINTAGES

SPAN = "*"
TOTAL_KEYS: dict[str, tuple[str, ...]] = {
    "origin_total": ("origin",),
    "destination_total": ("destination",),
    "world_total": (),
}
FORECAST_COLUMNS: tuple[str, ...] = (
    "run_id", "cutoff", "model", "run_kind", "level", "origin", "destination", "horizon", "target_month",
    "mean", *QUANTILE_COLUMNS, "p_positive",
)
ACTUAL_COLUMNS: tuple[str, ...] = ("origin", "destination", "month", "arrivals", "load_id", "published_on")
VINTAGE_KEY_MAX_CHARS = 120


class ScoringInputError(ValueError):
    """A frame handed to scoring is malformed; the message names the frame, the column or key, and the fix."""


def _require(frame: pd.DataFrame, columns: Iterable[str], what: str) -> None:
    missing = [c for c in columns if c not in frame.columns]
    if missing:
        raise ScoringInputError(f"{what} lacks column(s) {missing}; it has {list(frame.columns)}")


def _months(values: pd.Series) -> pd.Series:
    return pd.to_datetime(values).astype("datetime64[us]")


def _month_index(values: pd.Series) -> np.ndarray:
    return (values.dt.year * 12 + values.dt.month).to_numpy(dtype=np.int64)


def vintage_keys(load_id: pd.Series, published_on: pd.Series) -> pd.Series:
    """'17@2025-03-10': the (load, publication date) pair that identifies the vintage of one actual."""
    return load_id.astype("int64").astype(str) + "@" + _months(published_on).dt.strftime("%Y-%m-%d")


def _join_keys(keys: Iterable[str]) -> str:
    text = "+".join(sorted(set(keys)))
    if len(text) <= VINTAGE_KEY_MAX_CHARS:
        return text
    return "md5:" + hashlib.md5(text.encode("utf-8")).hexdigest()


def key_sets(cells: pd.DataFrame, group_cols: list[str]) -> pd.DataFrame:
    """Per group, the sorted '+'-joined set of `actual_vintage_key`: the vintage of a sum of actuals.

    Vectorised: each distinct key gets a 64-bit digest, a group's set is the XOR of its keys' digests,
    and only one label per distinct set is built in Python (there are few; groups are many).
    """
    pairs = cells[[*group_cols, "actual_vintage_key"]].drop_duplicates().reset_index(drop=True)
    digest = {k: int.from_bytes(hashlib.md5(k.encode("utf-8")).digest()[:8], "little")
              for k in pairs["actual_vintage_key"].unique()}
    hashes = pairs["actual_vintage_key"].map(digest).to_numpy(dtype=np.uint64)
    gid = pairs.groupby(group_cols, sort=False).ngroup().to_numpy()
    order = np.argsort(gid, kind="stable")
    starts = np.flatnonzero(np.r_[True, gid[order][1:] != gid[order][:-1]])
    signature = np.bitwise_xor.reduceat(hashes[order], starts)
    groups = pairs.iloc[order[starts]][group_cols].reset_index(drop=True)
    members = pairs.assign(_gid=gid)
    labels: dict[int, str] = {}
    for sig, g in zip(signature.tolist(), gid[order][starts].tolist(), strict=True):
        if sig not in labels:
            labels[sig] = _join_keys(members.loc[members["_gid"] == g, "actual_vintage_key"])
    groups["actual_vintage_key"] = [labels[sig] for sig in signature.tolist()]
    return groups


def _prepare_actuals(actuals: pd.DataFrame) -> pd.DataFrame:
    _require(actuals, ACTUAL_COLUMNS, "actuals")
    out = actuals.loc[:, list(ACTUAL_COLUMNS)].rename(columns={"month": "target_month"})
    out["target_month"] = _months(out["target_month"])
    out["published_on"] = _months(out["published_on"])
    keys = ["origin", "destination", "target_month"]
    dup = out.duplicated(keys, keep=False)
    if dup.any():
        row = out[dup].iloc[0]
        raise ScoringInputError(
            f"actuals have {int(dup.sum())} rows sharing a key, e.g. origin={row.origin}, "
            f"destination={row.destination}, month={row.target_month:%Y-%m}; the actuals views (sql/20_*) "
            "must give one row per dyad and month"
        )
    out["actual_vintage_key"] = vintage_keys(out["load_id"], out["published_on"])
    return out


def reported_cells(actuals: pd.DataFrame) -> pd.DataFrame:
    """One row per reported (destination, month) with its vintage; a cell must come from one vintage."""
    cols = ["destination", "target_month", "load_id", "published_on", "actual_vintage_key"]
    cells = actuals[cols].drop_duplicates()
    mixed = cells.duplicated(["destination", "target_month"], keep=False)
    if mixed.any():
        row = cells[mixed].iloc[0]
        raise ScoringInputError(
            f"actuals for destination={row.destination}, month={row.target_month:%Y-%m} come from "
            f"{int(mixed.sum())} vintages; a vintage view must take each (destination, month) from one load"
        )
    return cells


def sum_to_totals(cells: pd.DataFrame, scope: pd.DataFrame, time_col: str, with_vintage: bool) -> pd.DataFrame:
    """Origin, destination and world sums of dyad cells, kept only where every dyad in scope has a cell.

    `cells`: run_id, origin, destination, `time_col`, arrivals (+ load_id, published_on, actual_vintage_key
    when `with_vintage`). `scope`: the dyads each run forecast (run_id, origin, destination, and `time_col`
    if the scope varies by month). Returns run_id, level, origin, destination, `time_col`, actual, n_cells
    (+ actual_load_id, actual_published_on, actual_vintage_key).
    """
    scope_time = [time_col] if time_col in scope.columns else []
    parts = []
    for level, keys in TOTAL_KEYS.items():
        need = scope.groupby(["run_id", *scope_time, *keys]).size().rename("n_cells").reset_index()
        aggs = {"actual": ("arrivals", "sum"), "n_reported": ("arrivals", "size")}
        if with_vintage:
            aggs |= {"actual_load_id": ("load_id", "max"), "actual_published_on": ("published_on", "max")}
        gcols = ["run_id", time_col, *keys]
        got = cells.groupby(gcols).agg(**aggs).reset_index()
        if with_vintage:
            got = got.merge(key_sets(cells, gcols), on=gcols)
        both = got.merge(need, on=["run_id", *scope_time, *keys])
        both = both[both["n_reported"] == both["n_cells"]].drop(columns="n_reported")
        both["level"] = level
        for side in ("origin", "destination"):
            if side not in keys:
                both[side] = SPAN
        parts.append(both)
    return pd.concat(parts, ignore_index=True)


def attach_actuals(forecasts: pd.DataFrame, actuals: pd.DataFrame) -> tuple[pd.DataFrame, int]:
    """Forecast rows that can be scored, with their actual and its vintage; also how many totals could not.

    A dyad row needs its (destination, month) reported (a dyad the vintage does not list had zero
    arrivals); a total row needs that for every dyad the same run forecast for that target month.
    """
    _require(forecasts, FORECAST_COLUMNS, "forecasts")
    unknown = sorted(set(forecasts["level"]) - set(LEVELS))
    if unknown:
        raise ScoringInputError(f"forecasts: unknown level(s) {unknown}; expected one of {list(LEVELS)}")
    fc = forecasts.copy()
    fc["target_month"] = _months(fc["target_month"])
    acts = _prepare_actuals(actuals)
    is_dyad = fc["level"] == "dyad"
    keys = ["origin", "destination", "target_month"]
    # A forecast dyad is scored when its (destination, month) was reported; no row there = implied zero.
    dyads = fc[is_dyad].merge(reported_cells(acts), on=["destination", "target_month"], how="inner")
    dyads = dyads.merge(acts[[*keys, "arrivals"]], on=keys, how="left")
    dyads["arrivals"] = dyads["arrivals"].fillna(0)
    dyads = dyads.rename(columns={"arrivals": "actual", "load_id": "actual_load_id",
                                  "published_on": "actual_published_on"})
    dyads["n_cells"] = 1
    cells = dyads.rename(columns={"actual": "arrivals", "actual_load_id": "load_id",
                                  "actual_published_on": "published_on"})
    totals_fc = fc[~is_dyad]
    if totals_fc.empty:
        return dyads, 0
    scope = fc.loc[is_dyad, ["run_id", *keys]]
    sums = sum_to_totals(cells, scope, "target_month", with_vintage=True)
    totals = totals_fc.merge(sums, on=["run_id", "level", *keys], how="inner")
    return pd.concat([dyads, totals], ignore_index=True), len(totals_fc) - len(totals)


def measures(columns: Mapping[str, ArrayLike], deviance_floor: float = metrics.DEVIANCE_FLOOR,
             tweedie_power: float = metrics.TWEEDIE_POWER) -> dict[str, np.ndarray]:
    """Every per-row measure of the accuracy log from the columns actual, mean, q050 .. q950, p_positive.

    Takes any mapping of equal-length columns (a DataFrame, or numpy arrays from the warehouse), so that the
    scoring step and `score_frame` compute the log's values with the same code. The deviance floor and the
    Tweedie power are returned as constant columns: each row records the settings it was scored with.
    """
    y, point = np.asarray(columns["actual"], dtype=float), np.asarray(columns["mean"], dtype=float)
    quantiles = {q: np.asarray(columns[q], dtype=float) for q in QUANTILE_COLUMNS}
    out: dict[str, np.ndarray] = {
        "error": metrics.error(y, point),
        "abs_error": metrics.absolute_error(y, point),
        "sq_error": metrics.squared_error(y, point),
        "poisson_deviance": metrics.poisson_deviance(y, point, floor=deviance_floor),
        "tweedie_deviance": metrics.tweedie_deviance(y, point, power=tweedie_power, floor=deviance_floor),
        "tweedie_power": np.full(y.size, tweedie_power),
        "deviance_floor": np.full(y.size, deviance_floor),
    }
    for alpha, lo, hi in metrics.INTERVALS:
        pct = round(100 * (1 - alpha))
        out[f"covered_{pct}"] = metrics.covered(y, quantiles[lo], quantiles[hi])
        out[f"interval_score_{pct}"] = metrics.interval_score(y, quantiles[lo], quantiles[hi], alpha)
    parts = metrics.wis_from_quantiles(y, quantiles)
    out["wis"], out["wis_dispersion"] = parts.wis, parts.dispersion
    out["wis_overprediction"], out["wis_underprediction"] = parts.overprediction, parts.underprediction
    out["predicted_positive"] = metrics.predicted_positive(columns["p_positive"])
    out["actual_positive"] = y > 0
    out["exceeded"] = y > quantiles["q950"]
    return out


def add_measures(frame: pd.DataFrame, deviance_floor: float = metrics.DEVIANCE_FLOOR,
                 tweedie_power: float = metrics.TWEEDIE_POWER) -> pd.DataFrame:
    """`frame` with the columns of `measures` added."""
    return frame.assign(**measures(frame, deviance_floor=deviance_floor, tweedie_power=tweedie_power))


def score_frame(
    forecasts: pd.DataFrame,
    actuals: pd.DataFrame,
    *,
    vintage: str,
    naive_scales: pd.DataFrame | None = None,
    scored_at: datetime | None = None,
    batch_id: str = "",
    deviance_floor: float = metrics.DEVIANCE_FLOOR,
    tweedie_power: float = metrics.TWEEDIE_POWER,
) -> pd.DataFrame:
    """Accuracy rows (ACCURACY_COLUMNS) for every forecast row whose actual exists in `actuals`.

    `forecasts`: forecast_rows columns (+ optional as_of, run_created_at); `actuals`: one vintage of the
    actuals views (origin, destination, month, arrivals, load_id, published_on); `naive_scales`: run_id,
    level, naive_scale (missing -> NULL MASE). `result.attrs["totals_incomplete"]` counts total rows left
    for later because a destination-month they span is not reported yet.
    """
    if vintage not in VINTAGES:
        raise ScoringInputError(f"vintage {vintage!r}: use one of {list(VINTAGES)}")
    rows, incomplete = attach_actuals(forecasts, actuals)
    rows = add_measures(rows, deviance_floor=deviance_floor, tweedie_power=tweedie_power)
    if naive_scales is not None and not naive_scales.empty:
        rows = rows.merge(naive_scales[["run_id", "level", "naive_scale"]], on=["run_id", "level"], how="left")
    else:
        rows["naive_scale"] = np.nan
    rows["scaled_error"] = rows["abs_error"] / rows["naive_scale"]
    rows["vintage"] = vintage
    rows["batch_id"] = batch_id
    rows["scored_at"] = pd.Timestamp(scored_at or datetime.now(UTC).replace(tzinfo=None)).as_unit("us")
    for optional in ("as_of", "run_created_at"):
        if optional not in rows.columns:
            rows[optional] = pd.NaT
    out = rows.loc[:, list(ACCURACY_COLUMNS)].reset_index(drop=True)
    out.attrs["totals_incomplete"] = incomplete
    return out


def naive_scales(history: pd.DataFrame, scope: pd.DataFrame, run_ids: Iterable[str] | None = None) -> pd.DataFrame:
    """MASE denominators per run and level from the history the run could see (Hyndman & Koehler 2006).

    `history`: origin, destination, month, arrivals of the run's in-sample period as published by its as-of
    date (the scoring step uses the training window up to the cutoff: sql/58_scoring_scales.sql, which is
    this computation in the warehouse);
    `scope`: run_id, origin, destination (the dyads the run forecast). For each level the one-step
    persistence errors |y_t - y_{t-1}| of every series (dyads, origin / destination totals over the scope,
    world total) are pooled; a total counts in a month only if every dyad it sums was reported then.
    Runs with the same dyad set share one computation. Returns one row per run (those in `scope`, plus
    `run_ids`) and level: run_id, level, naive_scale (NaN if undefined), n_pairs.
    """
    _require(history, ("origin", "destination", "month", "arrivals"), "history")
    _require(scope, ("run_id", "origin", "destination"), "scope")
    scope = scope[["run_id", "origin", "destination"]].drop_duplicates().sort_values(["origin", "destination"])
    dyad_set = (scope["origin"] + ">" + scope["destination"]).groupby(scope["run_id"]).agg("|".join)
    first_run: dict[str, str] = {}
    rep_of = pd.Series({run: first_run.setdefault(key, run) for run, key in dyad_set.items()}, dtype=object)
    representative = list(first_run.values())
    rep_scope = scope[scope["run_id"].isin(representative)]
    hist = history[["origin", "destination", "month", "arrivals"]].copy()
    hist["month"] = _months(hist["month"])
    cells = rep_scope.merge(hist, on=["origin", "destination"], how="inner")
    series = [cells.assign(level="dyad").rename(columns={"arrivals": "actual"})]
    if not cells.empty:
        series.append(sum_to_totals(cells, rep_scope, "month", with_vintage=False))
    allrows = pd.concat(series, ignore_index=True)
    out = pd.DataFrame({"rep": np.repeat(representative, len(LEVELS)), "level": list(LEVELS) * len(representative)})
    out["naive_scale"], out["n_pairs"] = np.nan, 0
    if not allrows.empty:
        slot = out.reset_index().rename(columns={"index": "_slot", "rep": "run_id"})[["run_id", "level", "_slot"]]
        allrows = allrows.merge(slot, on=["run_id", "level"])
        series_id = allrows.groupby(["run_id", "level", "origin", "destination"], sort=False).ngroup().to_numpy()
        scales, pairs = metrics.pooled_naive_scales(
            allrows["_slot"].to_numpy(), series_id, _month_index(allrows["month"]),
            allrows["actual"].to_numpy(float), len(out))
        out["naive_scale"], out["n_pairs"] = scales, pairs
    runs = pd.DataFrame({"run_id": list(dict.fromkeys([*rep_of.index, *(run_ids or [])]))})
    runs["rep"] = runs["run_id"].map(rep_of)
    known = runs.dropna(subset=["rep"]).merge(out, on="rep").drop(columns="rep")
    unknown = runs[runs["rep"].isna()][["run_id"]].merge(pd.DataFrame({"level": list(LEVELS)}), how="cross")
    unknown = unknown.assign(naive_scale=np.nan, n_pairs=0)
    result = pd.concat([known, unknown], ignore_index=True)[["run_id", "level", "naive_scale", "n_pairs"]]
    result["n_pairs"] = result["n_pairs"].astype("int64")
    return result
