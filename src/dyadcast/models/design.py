"""Design matrices shared by the regression models: one place for missing values, dummies and seasonality.

Why one helper: every regression model must treat a NaN feature, an origin never seen in training
and the calendar month of the *target* (not of the anchor) the same way, and the published worked
examples in the tests must run through exactly the code the models use.

Conventions:
* `log1p` columns: log(1 + max(x, 0)); NaN becomes 0 ("no arrivals recorded") plus a
  `<col>_missing` indicator when training had any NaN in that column.
* `numeric` columns: NaN becomes the training median (plus an indicator, as above).
* `categorical` columns: treatment (dummy) coding with the first sorted level as reference. A level
  unseen in training gets 1/L in every dummy column, i.e. the average effect over the L levels.
* `season`: "dummies" (11 target-month dummies, January reference), "sincos" (2 columns) or None.
* Columns constant in training, or linearly dependent on earlier columns (e.g. two missing
  indicators that flag the same months), are dropped and listed in `dropped_`: a singular design
  makes statsmodels' Newton steps fail.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from dyadcast.models.base import target_column


def resolve_columns(frame: pd.DataFrame, patterns: Sequence[str]) -> list[str]:
    """Expand `push_*`-style prefixes against the frame; plain names must exist."""
    out: list[str] = []
    for pat in patterns:
        if pat.endswith("*"):
            out.extend(sorted(c for c in frame.columns if c.startswith(pat[:-1])))
        elif pat in frame.columns:
            out.append(pat)
        else:
            raise KeyError(f"training frame has no column {pat!r}; columns are {sorted(frame.columns)}")
    return list(dict.fromkeys(out))


def present_columns(frame: pd.DataFrame, patterns: Sequence[str]) -> list[str]:
    """The patterns the frame can satisfy: optional feature groups (push/pull sets vary by workspace)."""
    out = []
    for pat in patterns:
        wildcard = pat.endswith("*") and any(c.startswith(pat[:-1]) for c in frame.columns)
        if wildcard or pat in frame.columns:
            out.append(pat)
    return out


def target_calendar_month(frame: pd.DataFrame, horizon: int) -> np.ndarray:
    """Calendar month (1-12) of t + h, from `calendar_month` of t or else from `month`."""
    if "calendar_month" in frame.columns and frame["calendar_month"].notna().all():
        base = frame["calendar_month"].to_numpy(dtype=int)
    else:
        base = pd.to_datetime(frame["month"]).dt.month.to_numpy(dtype=int)
    return (base - 1 + horizon) % 12 + 1


def horizon_rows(train: pd.DataFrame, horizon: int) -> pd.DataFrame:
    """Training rows whose target at this horizon is known."""
    col = target_column(horizon)
    if col not in train.columns:
        raise KeyError(f"training frame has no column {col!r}; build features with horizon >= {horizon}")
    return train[train[col].notna()]


def active_dyads(train: pd.DataFrame) -> pd.MultiIndex:
    """Dyads with a positive flow anywhere in the training window (lag_1 or any known target)."""
    cols = [c for c in train.columns if c == "lag_1" or c.startswith("target_")]
    positive = (train[cols].fillna(0).to_numpy() > 0).any(axis=1)
    keys = train.loc[positive, ["origin", "destination"]].drop_duplicates()
    return pd.MultiIndex.from_frame(keys)


def in_dyads(frame: pd.DataFrame, dyads: pd.MultiIndex) -> np.ndarray:
    return pd.MultiIndex.from_frame(frame[["origin", "destination"]]).isin(dyads)


def subsample(frame: pd.DataFrame, max_rows: int | None, seed: int) -> pd.DataFrame:
    """Uniform row sample (seeded) so the large statsmodels fits stay within seconds."""
    if max_rows is None or len(frame) <= max_rows:
        return frame
    return frame.sample(n=max_rows, random_state=seed).sort_index()


def independent_columns(matrix: np.ndarray, intercept: bool, tol: float = 1e-9) -> np.ndarray:
    """Keep each column unless it is constant or a linear combination of the columns kept before it.

    Works on the Gram matrix of all rows (k x k), so a dummy for a rare level is never missed. The squared
    distance of column j from the span of the kept columns is g_jj - |L^-1 g_kj|^2, with L the Cholesky
    factor of the kept columns' Gram matrix, grown one column at a time (one triangular solve per column).
    """
    from scipy.linalg import solve_triangular

    gram = matrix.T @ matrix
    k = matrix.shape[1]
    keep = np.zeros(k, dtype=bool)
    chol = np.zeros((k, k))
    size = 0
    constant = np.ptp(matrix, axis=0) == 0 if matrix.shape[0] else np.ones(k, dtype=bool)
    for j in range(k):
        if not (intercept and j == 0) and constant[j]:
            continue
        g_jj = gram[j, j]
        if g_jj <= 0:
            continue
        kept = np.flatnonzero(keep)
        v = solve_triangular(chol[:size, :size], gram[kept, j], lower=True) if size else np.zeros(0)
        resid = g_jj - float(v @ v)
        if resid > tol * g_jj:
            chol[size, :size] = v
            chol[size, size] = np.sqrt(resid)
            size += 1
            keep[j] = True
    return keep


@dataclass
class Design:
    """Learns the encoding on training rows (`fit`) and applies it identically later (`transform`)."""

    log1p: Sequence[str] = ()
    numeric: Sequence[str] = ()
    categorical: Sequence[str] = ()
    season: str | None = None
    intercept: bool = True
    names_: list[str] = field(default_factory=list, init=False)
    _fill: dict[str, float] = field(default_factory=dict, init=False)
    _indicators: list[str] = field(default_factory=list, init=False)
    _levels: dict[str, list] = field(default_factory=dict, init=False)
    _keep: np.ndarray | None = field(default=None, init=False)
    dropped_: list[str] = field(default_factory=list, init=False)

    def fit(self, frame: pd.DataFrame, horizon: int = 0) -> Design:
        self.fit_transform(frame, horizon)
        return self

    def fit_transform(self, frame: pd.DataFrame, horizon: int = 0) -> np.ndarray:
        """Learn the encoding and return the training matrix (built once, not again by `transform`)."""
        if len(frame) == 0:
            raise ValueError("cannot build a design from an empty training frame")
        self.log1p = resolve_columns(frame, self.log1p)
        self.numeric = resolve_columns(frame, self.numeric)
        self._fill = {c: 0.0 for c in self.log1p}
        for c in self.numeric:
            med = frame[c].median()
            self._fill[c] = float(med) if pd.notna(med) else 0.0
        self._indicators = [c for c in [*self.log1p, *self.numeric] if frame[c].isna().any()]
        self._levels = {c: sorted(frame[c].dropna().unique().tolist()) for c in self.categorical}
        self._keep = None
        matrix, names = self._build(frame, horizon)
        self._keep = independent_columns(matrix, self.intercept)
        self.names_ = [n for n, k in zip(names, self._keep, strict=True) if k]
        self.dropped_ = [n for n, k in zip(names, self._keep, strict=True) if not k]
        return matrix[:, self._keep]

    def transform(self, frame: pd.DataFrame, horizon: int = 0) -> np.ndarray:
        if self._keep is None:
            raise RuntimeError("Design.transform called before fit")
        matrix, _ = self._build(frame, horizon)
        return matrix[:, self._keep]

    def _build(self, frame: pd.DataFrame, horizon: int) -> tuple[np.ndarray, list[str]]:
        missing = [c for c in [*self.log1p, *self.numeric, *self.categorical] if c not in frame.columns]
        if missing:
            raise KeyError(f"frame lacks feature column(s) {missing} that the model was trained with")
        n = len(frame)
        cols: list[np.ndarray] = []
        names: list[str] = []
        if self.intercept:
            cols.append(np.ones(n))
            names.append("const")
        for c in self.log1p:
            x = frame[c].to_numpy(dtype=float)
            cols.append(np.log1p(np.clip(np.nan_to_num(x, nan=self._fill[c]), 0.0, None)))
            names.append(f"log1p_{c}")
        for c in self.numeric:
            cols.append(np.nan_to_num(frame[c].to_numpy(dtype=float), nan=self._fill[c]))
            names.append(c)
        for c in self._indicators:
            cols.append(frame[c].isna().to_numpy(dtype=float))
            names.append(f"{c}_missing")
        for c in self.categorical:
            levels = self._levels[c]
            values = frame[c].to_numpy()
            known = pd.Index(levels).get_indexer(values)
            for j, level in enumerate(levels[1:], start=1):
                cols.append(np.where(known == j, 1.0, np.where(known < 0, 1.0 / len(levels), 0.0)))
                names.append(f"{c}[{level}]")
        if self.season == "dummies":
            m = target_calendar_month(frame, horizon)
            for k in range(2, 13):
                cols.append((m == k).astype(float))
                names.append(f"target_month[{k}]")
        elif self.season == "sincos":
            angle = 2 * np.pi * (target_calendar_month(frame, horizon) - 1) / 12
            cols.extend([np.sin(angle), np.cos(angle)])
            names.extend(["target_month_sin", "target_month_cos"])
        elif self.season is not None:
            raise ValueError(f"season={self.season!r}: use 'dummies', 'sincos' or None")
        matrix = np.column_stack(cols) if cols else np.empty((n, 0))
        return matrix, names
