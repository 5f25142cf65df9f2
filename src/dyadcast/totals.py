"""Origin, destination and world totals whose intervals agree with the dyad forecasts they add up.

Why not add dyad quantiles: the 95 % quantile of a sum is not the sum of 95 % quantiles (that would be
right only if every dyad moved in lock-step). Instead, per horizon:

1. each dyad's forecast row is read as a hurdle distribution (`dyadcast.distributions.fit_hurdle_nb`): 0
   with probability 1 - p_positive, else a zero-truncated NB2(m, alpha) whose mean makes the row's mean
   exact; alpha is the one whose CDF best brackets the row's quantiles (rows of NB models are recovered as
   they are). A row with mean 0 but p_positive > 0 puts its positives at 1;
2. dyads are drawn jointly, `n_draws` times: a Gaussian copula with correlation `rho` between dyads of one
   origin (a shared shock: a crisis moves all of an origin's flows) and independence across origins;
   `dyadcast.models.conformal.estimate_origin_rho` estimates rho from held-out residuals;
3. draws are summed per origin, destination and world; quantiles and P(>0) come from the sums, P(>0)
   clipped to [max p_i, min(1, sum p_i)] (a sum is positive when any part is). The mean is the exact sum of
   the dyad means, not the sampled one.

Alternative not taken: MinT reconciliation (Wickramasuriya, Athanasopoulos & Hyndman 2019, JASA) adjusts
forecasts of every level to be coherent; it reconciles means and needs a covariance of the base forecast
errors of every total, which we would have to forecast separately. Here only dyads are forecast and every
total is derived from them, so coherence holds by construction.

Cost. 40,000 dyads x 6 horizons x 1,000 draws are 240 M dyad-draws: an inverse CDF per draw took ~20 s CPU
per model; this takes ~2-3 s (bench/totals_cost.py), plus ~0.4 s per further distinct rho.
* A dyad's copula normals are drawn once and serve every horizon (Box-Muller, one generator per (seed,
  origin), so neither chunking nor row order changes the result). Each horizon's totals are exact draws of
  its own distribution; only their Monte-Carlo errors are correlated across horizons.
* A draw is the number of the dyad's CDF thresholds, on the normal scale (T_k = Phi^-1(P(Y <= k))), that
  its copula normal z exceeds. Each dyad's normals are sorted once per distinct rho, so the draws above T_k
  are a prefix whose length one binary search finds: the work follows the thresholds a dyad can reach, and
  the draw values are runs of equal counts. z is quantised (steps of 2^-20 of its range or finer, a change
  in probability below 1e-5 per draw) to pack value and draw index into one integer to sort.
* Counts up to EXACT_UP_TO are exact NB quantiles; above, a draw interpolates the cube root of the count
  linearly in z between exact knots KNOT_RATIO apart (the cube root of a gamma-like count is close to linear
  in the normal score: Wilson & Hilferty 1931, PNAS, from memory). Against scipy's nbinom.ppf such draws
  are within 1 count or 0.5 %, and their sums low by under 5e-4 relative (alpha up to 20): far below a
  total's Monte-Carlo error.
* Each group adds its draws up with two bincounts over the draws that can be positive in some group.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd
from scipy import special

from dyadcast.distributions import fit_hurdle_nb
from dyadcast.models.base import quantile_column

__all__ = ["DEFAULT_RHO", "TOTAL_COLUMNS", "aggregate_totals", "fit_hurdle_nb", "with_totals"]

DEFAULT_RHO = 0.2  # judgement, no source: a moderate shared origin shock; prefer an estimate when one exists
TOTAL_COLUMNS = ("level", "origin", "destination", "horizon", "target_month")
EXACT_UP_TO = 64  # draws up to this count are exact NB quantiles
KNOT_RATIO = 1.2  # spacing of the exact knots above it (see the module docstring for the error)
TABLE_WIDTHS = (4, 16, EXACT_UP_TO, 256)  # CDF tables grow through these widths while a dyad can reach them
Z_BOUND = 8.5  # |z| < 8.16: Box-Muller float32 normals are bounded by sqrt(-2 log 2^-24) = 5.77


def aggregate_totals(dyad_forecast: pd.DataFrame, quantiles: Sequence[float], n_draws: int = 1000,
                     rho: float | Mapping[Any, float] | None = DEFAULT_RHO, seed: int = 0,
                     chunk_cells: int = 2_000_000) -> pd.DataFrame:
    """Rows for every origin total, destination total and the world total, per horizon and target month.

    `rho`: one within-origin copula correlation, or one per horizon ({h: rho}, keys int or str, e.g. a
    model's `fitted_state()["origin_rho"]`); None or a missing horizon uses DEFAULT_RHO. `chunk_cells` bounds
    the dyad-draws held at once (whole origins per chunk); it changes memory, not the result.
    """
    levels = sorted(float(q) for q in quantiles)
    qcols = [quantile_column(q) for q in levels]
    frame = dyad_forecast
    if "level" in frame.columns:
        frame = frame[frame["level"] == "dyad"]
    missing = [c for c in ("origin", "destination", "horizon", "target_month", "mean", *qcols, "p_positive")
               if c not in frame.columns]
    if missing:
        raise ValueError(f"aggregate_totals: dyad forecast lacks columns {missing}; pass the models' predict() output")
    frame = frame.dropna(subset=["horizon", "target_month"])  # no group to total them in (as groupby does)
    if frame.empty:
        return pd.DataFrame(columns=[*TOTAL_COLUMNS, "mean", *qcols, "p_positive"])
    plan = _Plan.build(frame, levels, qcols, rho)
    draws = _Draws(plan, n_draws, seed)
    draws.run(chunk_cells)
    return _summarise(plan, draws, levels, qcols)


def _rho_for(rho: float | Mapping[Any, float] | None, horizon: int) -> float:
    if isinstance(rho, Mapping):
        rho = rho.get(horizon, rho.get(str(horizon)))
    value = DEFAULT_RHO if rho is None else float(rho)
    if not 0.0 <= value < 1.0:
        raise ValueError(f"aggregate_totals: rho={value} for horizon {horizon} must lie in [0, 1)")
    return value


@dataclass
class _Plan:
    """The forecast as arrays: groups (horizon, target month), and per group x dyad the hurdle NB parameters.

    Dyads are numbered over the whole frame ("universe", sorted by origin, destination), so a dyad keeps its
    copula normals in every group; a dyad listed twice in a group counts twice, each with its own normals.
    """

    groups: list[tuple[int, Any]]
    row_group: np.ndarray
    origins: np.ndarray
    dests: np.ndarray
    row_origin: np.ndarray
    row_dest: np.ndarray
    mean: np.ndarray
    p_row: np.ndarray
    u_origin: np.ndarray
    u_dest: np.ndarray
    p: np.ndarray  # (groups, universe), 0 where a dyad is absent
    m: np.ndarray
    alpha: np.ndarray
    rho: np.ndarray

    @classmethod
    def build(cls, frame: pd.DataFrame, levels: list[float], qcols: list[str],
              rho: float | Mapping[Any, float] | None) -> _Plan:
        grouped = frame.groupby(["horizon", "target_month"], sort=True)
        row_group = grouped.ngroup().to_numpy()
        groups = [(int(h), t) for h, t in grouped.size().index]
        row_origin, origins = pd.factorize(frame["origin"].astype(str), sort=True)
        row_dest, dests = pd.factorize(frame["destination"].astype(str), sort=True)
        key = row_origin.astype(np.int64) * len(dests) + row_dest
        copies = _listing(key, row_group)
        width = int(copies.max()) + 1
        ukey, u_idx = np.unique(key * width + copies, return_inverse=True)
        ukey //= width
        p = np.clip(frame["p_positive"].to_numpy(dtype=float), 0.0, 1.0)
        mean = frame["mean"].to_numpy(dtype=float)
        m, alpha = fit_hurdle_nb(mean, p, frame[qcols].to_numpy(dtype=float), levels)
        shape = (len(groups), ukey.size)
        grid = {name: np.zeros(shape) for name in ("p", "m")}
        grid["alpha"] = np.ones(shape)
        for name, values in (("p", p), ("m", m), ("alpha", alpha)):
            grid[name][row_group, u_idx] = values
        return cls(groups=groups, row_group=row_group, origins=np.asarray(origins), dests=np.asarray(dests),
                   row_origin=row_origin, row_dest=row_dest, mean=mean, p_row=p,
                   u_origin=ukey // len(dests), u_dest=ukey % len(dests), p=grid["p"], m=grid["m"],
                   alpha=grid["alpha"], rho=np.array([_rho_for(rho, h) for h, _ in groups]))


def _listing(key: np.ndarray, group: np.ndarray) -> np.ndarray:
    """0 for the first row of a dyad in a group, 1 for a second row of the same dyad, and so on."""
    pair = pd.Series(group.astype(np.int64) * (int(key.max()) + 1) + key)
    if not pair.duplicated().any():
        return np.zeros(key.size, np.int64)
    return pair.groupby(pair).cumcount().to_numpy(dtype=np.int64)


def _box_muller(rng: np.random.Generator, rows: int, cols: int) -> np.ndarray:
    """(rows, cols) standard normals in float32 by the Box-Muller transform (Box & Muller 1958, Ann. Math. Stat.).

    Why not rng.standard_normal: its float32 ziggurat costs ~14 ns a value on the benchmark machine, this ~6 ns
    (numpy's vectorised log, sin and cos). Uniforms on a 2^-24 grid bound |z| by 5.77 (P(|Z| > 5.77) = 8e-9).
    """
    half = (rows + 1) // 2
    u = rng.random((2 * half, cols), dtype=np.float32)
    radius = np.subtract(np.float32(1.0), u[:half])  # in (0, 1]: the log never sees 0
    np.log(radius, out=radius)
    radius *= np.float32(-2.0)
    np.sqrt(radius, out=radius)
    angle = u[half:]
    angle *= np.float32(2.0 * np.pi)
    z = np.empty((2 * half, cols), np.float32)
    np.cos(angle, out=z[:half])
    np.sin(angle, out=z[half:])
    z[:half] *= radius
    z[half:] *= radius
    return z[:rows]


class _Draws:
    """Joint draws of every dyad, summed per (group, origin) and (group, destination), origin chunk by chunk."""

    def __init__(self, plan: _Plan, n_draws: int, seed: int) -> None:
        self.plan, self.n, self.seed = plan, int(n_draws), seed
        self.bounds = np.searchsorted(plan.u_origin, np.arange(plan.origins.size + 1))
        self.o_sums = np.zeros((len(plan.groups), plan.origins.size, self.n))
        self.d_sums = np.zeros((len(plan.groups), plan.dests.size, self.n))
        # a draw is stored as (quantised -z) << dbits | draw index, in 32 bits when there is room for 2^20 steps
        self.dbits = max(1, (self.n - 1).bit_length())
        self.kbits = 32 if self.dbits <= 12 else 44
        self.top = 1 << (self.kbits - self.dbits)
        self.scale = self.top / (2.0 * Z_BOUND)

    def run(self, chunk_cells: int) -> None:
        first, n_origins = 0, self.plan.origins.size
        while first < n_origins:  # whole origins per chunk
            last = first + 1
            while last < n_origins and (self.bounds[last + 1] - self.bounds[first]) * self.n <= chunk_cells:
                last += 1
            shock, own = self._normals(first, last)
            for rho in np.unique(self.plan.rho):
                chunk = _Chunk(self, first, last, self._sorted_keys(shock, own, float(rho), first, last))
                chunk.add_groups(np.flatnonzero(self.plan.rho == rho))
            first = last

    def _normals(self, first: int, last: int) -> tuple[np.ndarray, np.ndarray]:
        """Origin shocks (one row per origin) and the dyads' own normals; one generator per (seed, origin)."""
        lo = self.bounds[first]
        own = np.empty((self.bounds[last] - lo, self.n), np.float32)
        shock = np.empty((last - first, self.n), np.float32)
        for o in range(first, last):
            z = _box_muller(np.random.default_rng([self.seed, o]), self.bounds[o + 1] - self.bounds[o] + 1, self.n)
            shock[o - first] = z[0]
            own[self.bounds[o] - lo:self.bounds[o + 1] - lo] = z[1:]
        return shock, own

    def _sorted_keys(self, shock: np.ndarray, own: np.ndarray, rho: float, first: int, last: int) -> np.ndarray:
        """Per dyad, its draws z = sqrt(rho) shock + sqrt(1 - rho) own as sortable integers, largest z first."""
        lo = self.bounds[first]
        precise = np.float32 if self.kbits == 32 else np.float64
        a, b = precise(np.sqrt(rho) * self.scale), precise(np.sqrt(1.0 - rho) * self.scale)
        q = np.empty(own.shape, precise)
        for o in range(first, last):
            rows = slice(self.bounds[o] - lo, self.bounds[o + 1] - lo)
            np.multiply(own[rows], -b, out=q[rows])
            q[rows] += precise(Z_BOUND * self.scale) - a * shock[o - first]
        keys = q.astype(np.uint32 if self.kbits == 32 else np.uint64)  # q > 0, so this floors
        del q
        keys <<= keys.dtype.type(self.dbits)
        keys |= np.arange(self.n, dtype=keys.dtype)
        keys.sort(axis=1)
        return keys

    def quantised(self, z: np.ndarray) -> np.ndarray:
        """Thresholds on the quantised scale: a draw exceeds z when its stored value is below the result."""
        v = np.floor((Z_BOUND - np.asarray(z, dtype=float)) * self.scale)
        return np.fmin(np.fmax(v, 0.0), self.top).astype(np.int64)  # NaN (never expected) counts as out of reach

    def quantised_survival(self, surv: np.ndarray) -> np.ndarray:
        """`quantised` of the threshold -Phi^-1(surv) exceeded with probability surv (in place, no copies)."""
        v = special.ndtri(surv)  # surv a hair below 0 from rounding gives NaN: out of reach, as it should
        v += Z_BOUND
        v *= self.scale
        np.floor(v, out=v)
        np.fmax(v, 0.0, out=v)
        np.fmin(v, self.top, out=v)
        return v.astype(np.int64)


@dataclass
class _Law:
    """The hurdle NB of some dyads in one group, in the forms the thresholds need."""

    p: np.ndarray  # P(draw > 0)
    n: np.ndarray  # NB size 1 / alpha
    fail: np.ndarray  # 1 - scipy's p, alpha m / (1 + alpha m)
    log_fail: np.ndarray
    lp0: np.ndarray  # log P(Y_nb = 0)
    tail0: np.ndarray  # P(Y_nb >= 1)
    s_min: np.ndarray  # survival below which no draw of the dyad reaches a threshold

    @classmethod
    def of(cls, p: np.ndarray, m: np.ndarray, alpha: np.ndarray, z_top: np.ndarray) -> _Law:
        am = alpha * m
        n = 1.0 / alpha
        lp0 = -n * np.log1p(am)
        with np.errstate(divide="ignore"):
            log_fail = np.log(am) - np.log1p(am)
        return cls(p=p, n=n, fail=am / (1.0 + am), log_fail=log_fail, lp0=lp0, tail0=-np.expm1(lp0),
                   s_min=special.ndtr(-z_top) * (1.0 - 1e-9))


class _Chunk:
    """The sorted draws of the dyads of origins first..last-1 under one rho, and the sums of every group.

    A dyad's draws exceeding its positivity threshold are a prefix of its sorted draws. The union of these
    prefixes over the groups is gathered once (draw indices, where each draw adds up); each group then
    writes its values over it (0 past its own prefix) and adds them up with two bincounts.
    """

    def __init__(self, draws: _Draws, first: int, last: int, keys: np.ndarray) -> None:
        self.draws, self.first, self.last, self.keys = draws, first, last, keys
        self.lo = int(draws.bounds[first])
        self.size = keys.shape[0]
        self.rows = np.arange(self.size, dtype=np.int64)
        self.top_q = (keys[:, 0] >> keys.dtype.type(draws.dbits)).astype(np.int64)  # each dyad's largest z

    def count_above(self, rows: np.ndarray, tq: np.ndarray) -> np.ndarray:
        """How many draws of each dyad (chunk row) exceed the threshold quantised as tq: a binary search in
        each row, vectorised over the rows."""
        d = self.draws
        bound = tq << d.dbits
        flat = self.keys.ravel()
        base = rows * d.n
        lo, hi = np.zeros(rows.size, np.int64), np.full(rows.size, d.n, np.int64)
        for _ in range(d.n.bit_length()):
            mid = (lo + hi) >> 1
            open_ = lo < hi
            go = open_ & (flat[base + np.minimum(mid, d.n - 1)] < bound)
            lo, hi = np.where(go, mid + 1, lo), np.where(open_ & ~go, mid, hi)
        return lo

    def above(self, rows: np.ndarray, tq: np.ndarray, ordered: bool = False) -> np.ndarray:
        """How many draws of each dyad (chunk row) exceed the threshold quantised as tq, for thresholds at or
        above the dyad's positivity threshold in every group (so within the union prefix). numpy's search is
        ~1.6x faster on ascending keys: pass them so (`ordered`) or they are sorted here."""
        d = self.draws
        keys = (rows << d.kbits) + (tq << d.dbits)
        if ordered:
            return np.searchsorted(self.prefix, keys) - self.offset[rows]
        order = np.argsort(keys, kind="stable")
        out = np.empty(keys.size, np.int64)
        out[order] = np.searchsorted(self.prefix, keys[order])
        return out - self.offset[rows]

    def add_groups(self, groups: np.ndarray) -> None:
        d, plan = self.draws, self.draws.plan
        span = slice(self.lo, self.lo + self.size)
        positives = []
        union = np.zeros(self.size, np.int64)
        for g in groups:
            p = plan.p[g, span]
            rows = np.flatnonzero(p > 0)
            tq0 = d.quantised(-special.ndtri(p[rows]))  # positive where z > Phi^-1(1 - p)
            live = tq0 > self.top_q[rows]
            rows, tq0 = rows[live], tq0[live]
            npos = self.count_above(rows, tq0)
            union[rows] = np.maximum(union[rows], npos)
            positives.append((rows, npos))
        offset = np.zeros(self.size + 1, np.int64)
        np.cumsum(union, out=offset[1:])
        if offset[-1] == 0:
            return
        self.offset = offset
        where = np.repeat(self.rows * d.n - offset[:-1], union)
        where += np.arange(offset[-1])
        stored = self.keys.ravel()[where]
        del where
        self.prefix = np.add(stored, np.repeat(self.rows << d.kbits, union), dtype=np.int64)  # searchable
        draw = np.bitwise_and(stored, np.int64((1 << d.dbits) - 1), dtype=np.int64)
        del stored
        origin_at = np.repeat((plan.u_origin[span] - self.first) * d.n, union) + draw
        dest_at = np.repeat(plan.u_dest[span] * d.n, union) + draw
        del draw
        n_orig, n_dest = self.last - self.first, d.d_sums.shape[1]
        for g, (rows, npos) in zip(groups, positives, strict=True):
            if rows.size == 0:
                continue
            y = self._values(int(g), rows, npos, union, offset)
            d.o_sums[g, self.first:self.last] += np.bincount(origin_at, y, n_orig * d.n).reshape(n_orig, d.n)
            d.d_sums[g] += np.bincount(dest_at, y, n_dest * d.n).reshape(n_dest, d.n)

    def _values(self, g: int, rows: np.ndarray, npos: np.ndarray, union: np.ndarray, offset: np.ndarray
                ) -> np.ndarray:
        """The group's draw values over the union prefixes: the number of thresholds each draw exceeds."""
        d, plan = self.draws, self.draws.plan
        span = slice(self.lo, self.lo + self.size)
        law = _Law.of(plan.p[g, span][rows], plan.m[g, span][rows], plan.alpha[g, span][rows],
                      Z_BOUND - self.top_q[rows] / d.scale)
        tq, wide, knot_surv = self._thresholds(law)
        nthr = (tq > self.top_q[rows][:, None]).sum(axis=1)  # tq falls with k: the reachable ones come first
        thr_row = np.repeat(np.arange(rows.size), nthr)
        thr_k = np.repeat(np.cumsum(nthr) - 1, nthr) - np.arange(thr_row.size)  # k falling: the search keys rise
        thr_pos = self.above(rows[thr_row], tq[thr_row, thr_k], ordered=True)
        length, value = _runs(union, rows, npos, nthr, thr_row, thr_k, thr_pos)
        y = np.repeat(value, length)
        if wide.size:
            big = self._wide_values(law, rows, wide, knot_surv)
            if big is not None:
                row, j, v = big
                y[offset[rows[row]] + j] = v
        return y


    def _thresholds(self, law: _Law) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Quantised T_k for k = 1..EXACT_UP_TO (a draw is above k where z > T_k; 0: out of reach), the dyads
        that can exceed EXACT_UP_TO ("wide"), and their P(draw > k) at the knots up to the last table width.

        The CDF comes from the pmf recurrence in logs, in tables that grow (TABLE_WIDTHS) only for the dyads
        whose largest draw can reach their end; past EXACT_UP_TO only the knots are kept.
        """
        size = law.p.size
        tq = np.zeros((size, EXACT_UP_TO), np.int64)
        todo, knot_surv = np.arange(size), np.zeros((0, 0))
        lp_end, g_end, k0 = law.lp0.copy(), np.zeros(size), 0
        for width in TABLE_WIDTHS:
            k = np.arange(k0 + 1, width + 1, dtype=float)
            with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
                step = np.log(k[None, :] - 1.0 + law.n[todo, None]) + (law.log_fail[todo, None] - np.log(k)[None, :])
                step[:, 0] += lp_end[todo]
                lp = np.cumsum(step, axis=1)
                pmf = np.exp(lp)
                pmf[:, 0] += g_end[todo] * law.tail0[todo]
                cond = np.cumsum(pmf, axis=1) / law.tail0[todo, None]  # P(1 <= Y_nb <= k) / P(Y_nb >= 1)
            surv = law.p[todo, None] * (1.0 - cond)
            if width > EXACT_UP_TO:  # the wide dyads: keep the knots
                inside = _KNOTS[1:][_KNOTS[1:] <= width].astype(int)
                return tq, todo, np.concatenate([knot_surv, surv[:, inside - k0 - 1]], axis=1)
            need = surv > law.s_min[todo, None]
            r, c = np.nonzero(need)
            tq[todo[r], k0 + c] = self.draws.quantised_survival(surv[r, c])
            lp_end[todo], g_end[todo] = lp[:, -1], cond[:, -1]
            todo, k0 = todo[need[:, -1]], width
            knot_surv = surv[need[:, -1], -1:]  # at k = EXACT_UP_TO, the first knot
            if todo.size == 0:
                break
        return tq, todo, knot_surv

    def _wide_values(self, law: _Law, rows: np.ndarray, wide: np.ndarray, table_surv: np.ndarray
                     ) -> tuple[np.ndarray, np.ndarray, np.ndarray] | None:
        """(dyad, sorted position, value) of the draws above EXACT_UP_TO: cube roots interpolated in z."""
        d = self.draws
        k, surv = _knots(law, wide, table_surv)
        with np.errstate(invalid="ignore"):
            z_knot = -special.ndtri(surv)  # (wide dyads, knots); +inf past a dyad's last knot
        tq = d.quantised(z_knot)
        # draws above each knot (searched from the highest knot down, so that the keys rise)
        reach = np.zeros(surv.shape, np.int64)
        r, c = np.nonzero(tq[:, ::-1] > self.top_q[rows[wide]][:, None])
        c = k.size - 1 - c
        reach[r, c] = self.above(rows[wide[r]], tq[r, c], ordered=True)
        total = int(reach[:, 0].sum())
        if total == 0:
            return None
        # along a dyad's sorted draws, the knot below a draw falls from the last reached one to the first
        runs = reach.copy()
        runs[:, :-1] -= reach[:, 1:]
        knot = np.repeat(np.tile(np.arange(k.size - 1, -1, -1), wide.size), runs[:, ::-1].ravel())
        which = np.repeat(np.arange(wide.size), reach[:, 0])
        j = np.arange(total) - np.repeat(np.cumsum(reach[:, 0]) - reach[:, 0], reach[:, 0])
        at = which * k.size + knot
        root = np.cbrt(k)
        with np.errstate(invalid="ignore", divide="ignore"):
            slope = np.zeros(surv.shape)
            slope[:, :-1] = np.nan_to_num((root[1:] - root[:-1]) / (z_knot[:, 1:] - z_knot[:, :-1]), posinf=0.0)
        stored = self.prefix[self.offset[rows[wide[which]]] + j] & ((1 << d.kbits) - 1)
        z = Z_BOUND - ((stored >> d.dbits) + 0.5) / d.scale
        with np.errstate(invalid="ignore"):  # 0 x inf at a knot without a finite z: redone just below
            x = root[knot] + slope.ravel()[at] * np.maximum(z - z_knot.ravel()[at], 0.0)
        _open_intervals(x, law, wide, which, knot, z, z_knot, root, slope)
        top = np.append(k[1:], np.inf)[knot]
        value = np.clip(np.ceil(x**3 - 1e-9), k[knot] + 1, top)
        return wide[which], j, value


def _open_intervals(x: np.ndarray, law: _Law, wide: np.ndarray, which: np.ndarray, knot: np.ndarray, z: np.ndarray,
                    z_knot: np.ndarray, root: np.ndarray, slope: np.ndarray) -> None:
    """Cube roots (in `x`, in place) of the draws above a knot whose P(draw > k) rounds to 1 (z = -inf).

    Why: for a large flow with little spread (Poisson-like rows of 3,000 arrivals or more) the knot below the
    mass lies far enough out that P(draw > k) is 1 in floating point; the line from it to the next knot is
    undefined, and its draws came out NaN, and so did every total they entered. Such a draw lies on the line
    through the next knot, with the slope of the interval above it when both its knots are finite, else the
    Wilson-Hilferty slope of the dyad's NB, sd / (3 mean^(2/3)) (the cube root of a gamma-like count is close
    to linear in the normal score: Wilson & Hilferty 1931, PNAS, from memory). The knot above a dyad's mass
    keeps a finite z: `fit_hurdle_nb` reads rows of large flows back with alpha of at least about 6e-5 (the
    lower end of its grid, refined), so sd >= 0.008 mean and that knot lies within about 25 sd, where
    P(draw > k), computed directly (`_knots`), does not underflow.
    """
    finite = np.isfinite(z_knot)
    open_below = np.zeros(finite.shape, dtype=bool)
    open_below[:, :-1] = ~finite[:, :-1] & finite[:, 1:]
    sel = np.flatnonzero(open_below[which, knot])
    if sel.size == 0:
        return
    r, c = which[sel], knot[sel]
    above = np.minimum(c + 1, root.size - 2)  # the interval above: knots c + 1 and c + 2
    usable = (c + 2 < root.size) & finite[r, above + 1] & (slope[r, above] > 0)
    n, fail = law.n[wide[r]], law.fail[wide[r]]
    mean = n * fail / (1.0 - fail)
    wilson_hilferty = np.sqrt(n * fail) / (1.0 - fail) / (3.0 * np.cbrt(mean) ** 2)
    x[sel] = root[c + 1] + np.where(usable, slope[r, above], wilson_hilferty) * (z[sel] - z_knot[r, c + 1])


def _runs(union: np.ndarray, rows: np.ndarray, npos: np.ndarray, nthr: np.ndarray, thr_row: np.ndarray,
          thr_k: np.ndarray, thr_pos: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Every chunk row's union prefix as runs of equal value: (lengths, values), row after row.

    In a group's dyad (`rows`), the first thr_pos draws exceed T_k and the first npos exceed T_0, so the
    values fall from nthr + 1 to 1 along the sorted draws; then 0 to the end of the union prefix. Other
    dyads are one run of 0.
    """
    count = (union > 0).astype(np.int64)
    count[rows] += nthr + 1
    start = np.zeros(union.size + 1, np.int64)
    np.cumsum(count, out=start[1:])
    end = np.empty(start[-1], np.int64)  # where each run ends within its row, increasing
    value = np.zeros(start[-1])
    used = union > 0
    end[start[1:][used] - 1] = union[used]
    head = start[rows]
    end[head + nthr] = npos
    end[head[thr_row] + nthr[thr_row] - 1 - thr_k] = thr_pos
    runs = nthr + 1
    within = np.arange(runs.sum()) - np.repeat(np.cumsum(runs) - runs, runs)
    value[np.repeat(head, runs) + within] = np.repeat(runs, runs) - within
    length = end.copy()
    length[1:] -= end[:-1]
    first = start[:-1][used]
    length[first] = end[first]
    return length, value


def _knot_counts(first: int, last: int) -> np.ndarray:
    """Knots j = first..last-1: EXACT_UP_TO * KNOT_RATIO^j rounded, kept distinct."""
    j = np.arange(first, last)
    return np.maximum(np.round(EXACT_UP_TO * KNOT_RATIO**j), EXACT_UP_TO + j)


_KNOTS = _knot_counts(0, 64)  # the knots that fall inside the CDF tables come from there


def _knots(law: _Law, wide: np.ndarray, table_surv: np.ndarray, batch: int = 4) -> tuple[np.ndarray, np.ndarray]:
    """All knots (the same for every dyad) and P(draw > k) per wide dyad (rows) and knot (columns): from the
    tables (`table_surv`), then from the incomplete beta until no draw of the dyad can pass them (0 after)."""
    survs, j0 = [table_surv], table_surv.shape[1]
    todo = np.flatnonzero(table_surv[:, -1] > law.s_min[wide])
    while todo.size:
        k = _knot_counts(j0, j0 + batch)
        block = np.zeros((wide.size, batch))
        w = wide[todo]
        with np.errstate(divide="ignore", invalid="ignore"):
            block[todo] = special.betainc(k[None, :] + 1.0, law.n[w, None], law.fail[w, None]) \
                * (law.p[w] / law.tail0[w])[:, None]
        survs.append(block)
        todo = todo[block[todo, -1] > law.s_min[w]]
        j0 += batch
    return _knot_counts(0, j0), np.concatenate(survs, axis=1)


def _summarise(plan: _Plan, draws: _Draws, levels: list[float], qcols: list[str]) -> pd.DataFrame:
    frames = []
    n_o, n_d = plan.origins.size, plan.dests.size
    for g, (horizon, month) in enumerate(plan.groups):
        sel = plan.row_group == g
        orig, dest, p, mean = plan.row_origin[sel], plan.row_dest[sel], plan.p_row[sel], plan.mean[sel]
        o_in = np.flatnonzero(np.bincount(orig, minlength=n_o))
        d_in = np.flatnonzero(np.bincount(dest, minlength=n_d))
        specs = [("origin_total", plan.origins[o_in], np.full(o_in.size, "*"), draws.o_sums[g, o_in],
                  np.bincount(orig, weights=mean, minlength=n_o)[o_in], _p_bounds(p, orig, n_o)[:, o_in]),
                 ("destination_total", np.full(d_in.size, "*"), plan.dests[d_in], draws.d_sums[g, d_in],
                  np.bincount(dest, weights=mean, minlength=n_d)[d_in], _p_bounds(p, dest, n_d)[:, d_in]),
                 ("world_total", np.array(["*"]), np.array(["*"]), draws.o_sums[g].sum(axis=0, keepdims=True),
                  np.array([mean.sum()]), _p_bounds(p, np.zeros(p.size, np.int64), 1))]
        for level, origin, destination, sums, total_mean, (p_lo, p_hi) in specs:
            qs = np.quantile(sums, levels, axis=1, method="inverted_cdf")
            frames.append(pd.DataFrame({"level": level, "origin": origin, "destination": destination,
                                        "horizon": horizon, "target_month": month, "mean": total_mean,
                                        **dict(zip(qcols, qs, strict=True)),
                                        "p_positive": np.clip((sums > 0).mean(axis=1), p_lo, p_hi)}))
    out = pd.concat(frames, ignore_index=True)
    out["horizon"] = out["horizon"].astype("int16")
    return out


def _p_bounds(p: np.ndarray, idx: np.ndarray, size: int) -> np.ndarray:
    high = np.zeros(size)
    np.maximum.at(high, idx, p)
    return np.stack([high, np.minimum(1.0, np.bincount(idx, weights=p, minlength=size))])


def with_totals(dyad_forecast: pd.DataFrame, quantiles: Sequence[float], **kwargs: object) -> pd.DataFrame:
    """Dyad rows (level 'dyad') followed by their totals: the frame a snapshot stores."""
    dyads = dyad_forecast.drop(columns="level", errors="ignore")
    dyads.insert(0, "level", "dyad")
    return pd.concat([dyads, aggregate_totals(dyads, quantiles, **kwargs)], ignore_index=True)  # type: ignore[arg-type]
