"""A global synthetic panel in the drop contract: every origin x destination pair, every month, invented.

Why a generator of its own rather than the demo scenario: the benchmark needs the real users' scale
(200 x 200 countries x 240 months = 9.6 M dyad-months) produced in seconds, fully vectorised, with the shape
that makes the pipeline work hard: about 80 % zeros, a long tail of small flows and bursty crises, origin
push indicators, destination pull indicators, dyad attributes and one daily organic signal.

Codes come from the ISO 3166-1 user-assigned alpha-3 ranges: origins XAA, XAB, ... (XAA-XZZ, 676 codes),
destinations QMA, QMB, ... (QMA-QZZ, 364 codes). Everything is deterministic from `PanelSpec.seed`.

Counts are negative binomial (Poisson-gamma mixture) around
    log mu = c + size_o + appeal_d - 1.1 log(distance / 1000 km) + ties + dyad noise + push_o,t + pull_d,t
             + seasonality,
with c solved by bisection so that the expected share of zero dyad-months equals `zero_share`.

Publication: month M is first released on day `PUBLICATION_DAY` of M+1. A share of destinations revise
month M one month later (a complete restatement of that destination-month). Flows files list positive rows
plus one explicit zero row per (destination, month) that has no positive row, as DESIGN.md's contract says
(origins a file does not list had zero arrivals).
"""

from __future__ import annotations

import itertools
import string
from dataclasses import dataclass, replace
from datetime import date
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq

PUBLICATION_DAY = 15
NB_ALPHA = 1.5  # NB2 dispersion of the counts around mu
ORIGIN_INDICATORS = ("conflict_events", "fatalities", "instability")
DESTINATION_INDICATORS = ("recognition_rate", "policy_openness")
SIGNAL = "search_intensity"


@dataclass(frozen=True)
class PanelSpec:
    n_origins: int = 200
    n_destinations: int = 200
    n_months: int = 240  # the last month is the "new" month of the monthly drop
    first_month: date = date(2006, 1, 1)
    zero_share: float = 0.80
    revision_share: float = 0.25  # destinations that revise a month one month after its first release
    seed: int = 20260115

    @property
    def n_dyads(self) -> int:
        return self.n_origins * self.n_destinations


FULL = PanelSpec()
SMALL = PanelSpec(n_origins=50, n_destinations=40, n_months=60, first_month=date(2021, 1, 1))


def tiny(seed: int = 7) -> PanelSpec:
    """A panel small enough for unit tests (8 x 6 dyads, 30 months)."""
    return replace(SMALL, n_origins=8, n_destinations=6, n_months=30, seed=seed)


def codes(block: str, start: str, count: int) -> list[str]:
    """`count` codes of a user-assigned block, e.g. codes('Q', 'MA', 3) -> QMA, QMB, QMC."""
    pairs = ["".join(p) for p in itertools.product(string.ascii_uppercase, repeat=2)]
    available = [block + p for p in pairs[pairs.index(start):]]
    if count > len(available):
        raise ValueError(f"only {len(available)} user-assigned codes from {block}{start}; asked for {count}")
    return available[:count]


def origin_codes(spec: PanelSpec) -> list[str]:
    return codes("X", "AA", spec.n_origins)


def destination_codes(spec: PanelSpec) -> list[str]:
    return codes("Q", "MA", spec.n_destinations)


def month_starts(spec: PanelSpec) -> list[date]:
    first = spec.first_month.year * 12 + spec.first_month.month - 1
    return [date((first + k) // 12, (first + k) % 12 + 1, 1) for k in range(spec.n_months)]


def publication(month: date, delay_months: int = 1) -> date:
    index = month.year * 12 + month.month - 1 + delay_months
    return date(index // 12, index % 12 + 1, PUBLICATION_DAY)


@dataclass
class Panel:
    """The simulated world: arrays indexed [origin, destination, month] plus country and dyad tables."""

    spec: PanelSpec
    origins: list[str]
    destinations: list[str]
    months: list[date]
    latest: np.ndarray  # int32 (O, D, M): the revised (true) arrivals
    first: np.ndarray  # int32 (O, D, M): the first release
    revised: np.ndarray  # bool (D, M): destination-months restated one month later
    push: np.ndarray  # (O, M) latent push of each origin
    pull: np.ndarray  # (D, M) latent pull of each destination
    distance_km: np.ndarray  # (O, D)
    contiguous: np.ndarray
    common_language: np.ndarray
    colonial_tie: np.ndarray
    diaspora: np.ndarray

    @property
    def zero_share(self) -> float:
        return float((self.latest == 0).mean())


def _crisis_push(rng: np.random.Generator, n: int, months: int) -> np.ndarray:
    """AR(1) background plus rare crises (about one per origin per 15 years) that lift flows for months."""
    noise = rng.normal(0.0, 0.25, (n, months))
    push = np.zeros((n, months))
    for t in range(1, months):
        push[:, t] = 0.85 * push[:, t - 1] + noise[:, t]
    starts = rng.random((n, months)) < 1 / 180
    length = rng.geometric(1 / 8, (n, months))
    height = rng.uniform(1.5, 3.5, (n, months))
    for o, t in zip(*np.nonzero(starts), strict=True):
        end = min(months, t + length[o, t])
        ramp = np.minimum(1.0, (np.arange(t, end) - t + 1) / 2)  # two-month ramp up
        push[o, t:end] += height[o, t] * ramp
    return push


def _intercept(log_mu: np.ndarray, target: float) -> float:
    """c such that the mean NB zero probability of exp(c + log_mu) equals `target` (bisection)."""
    sample = log_mu.ravel()[:: max(1, log_mu.size // 400_000)]

    def zero_share(c: float) -> float:
        mu = np.exp(np.minimum(c + sample, 30.0))
        return float(np.mean((1 + NB_ALPHA * mu) ** (-1 / NB_ALPHA)))

    lo, hi = -30.0, 30.0
    for _ in range(60):
        mid = (lo + hi) / 2
        lo, hi = (mid, hi) if zero_share(mid) > target else (lo, mid)
    return (lo + hi) / 2


def simulate(spec: PanelSpec) -> Panel:
    """Draw the world; about 1 s and 0.5 GB at full scale."""
    rng = np.random.default_rng(spec.seed)
    n_o, n_d, n_m = spec.n_origins, spec.n_destinations, spec.n_months
    xy_o, xy_d = rng.uniform(0, 15_000, (n_o, 2)), rng.uniform(0, 15_000, (n_d, 2))
    distance = np.maximum(np.hypot(*(xy_o[:, None, :] - xy_d[None, :, :]).transpose(2, 0, 1)), 60.0)
    contiguous = (distance < 900) & (rng.random((n_o, n_d)) < 0.7)
    language = rng.random((n_o, n_d)) < 0.12
    colonial = rng.random((n_o, n_d)) < 0.04
    size = rng.normal(0.0, 1.3, n_o)
    appeal = rng.normal(0.0, 1.0, n_d)
    dyad = (size[:, None] + appeal[None, :] - 1.1 * np.log(distance / 1000) + 1.0 * contiguous
            + 0.5 * language + 0.4 * colonial + rng.normal(0.0, 1.2, (n_o, n_d)))
    push = _crisis_push(rng, n_o, n_m)
    pull = np.cumsum(rng.normal(0.0, 0.05, (n_d, n_m)), axis=1)
    calendar = np.array([m.month for m in month_starts(spec)])
    season = 0.25 * np.sin(2 * np.pi * calendar[None, :] / 12 + rng.uniform(0, 2 * np.pi, (n_d, 1)))
    log_mu = (dyad[:, :, None] + push[:, None, :] + pull[None, :, :] + season[None, :, :]).astype(np.float32)
    log_mu += np.float32(_intercept(log_mu, spec.zero_share))
    np.minimum(log_mu, np.float32(13.0), out=log_mu)  # cap a cell at about 440,000 arrivals
    lam = np.exp(log_mu, out=log_mu) * rng.gamma(1 / NB_ALPHA, NB_ALPHA, log_mu.shape).astype(np.float32)
    latest = rng.poisson(lam).astype(np.int32)
    del lam, log_mu
    revised = rng.random((n_d, n_m)) < spec.revision_share
    revised[:, -1] = False  # the newest month has not been revised yet
    first = latest.copy()
    undercount = rng.binomial(latest, 0.9).astype(np.int32)  # first releases miss some late registrations
    first[:, revised] = undercount[:, revised]
    diaspora = np.round(np.exp(dyad + rng.normal(6.0, 1.0, (n_o, n_d))), 0)
    return Panel(spec, origin_codes(spec), destination_codes(spec), month_starts(spec), latest, first, revised,
                 push, pull, distance, contiguous.astype(np.int64), language.astype(np.int64),
                 colonial.astype(np.int64), diaspora)


# --- Arrow tables in the drop contract ---------------------------------------------------------------------

def _dict(values: list[str], index: np.ndarray) -> pa.DictionaryArray:
    return pa.DictionaryArray.from_arrays(pa.array(index.astype(np.int32)), pa.array(values))


def _month_text(months: list[date]) -> list[str]:
    return [f"{m.year:04d}-{m.month:02d}" for m in months]


def _dates(values: list[date], index: np.ndarray) -> pa.Array:
    return pa.array(np.asarray(values, dtype="datetime64[D]")[index])


def _flows_rows(panel: Panel, counts: np.ndarray, cells: np.ndarray, published: list[date]) -> pa.Table:
    """Positive rows of the (destination, month) cells in `cells` (bool D x M), plus a zero row for each
    such cell without any positive row; `published[m]` is the publication date used for month m."""
    o, d, m = np.nonzero((counts > 0) & cells[None, :, :])
    arrivals = counts[o, d, m]
    empty_d, empty_m = np.nonzero(cells & ~(counts > 0).any(axis=0))
    o = np.concatenate([o, np.zeros(len(empty_d), dtype=o.dtype)])  # an explicit zero row: first origin
    d, m = np.concatenate([d, empty_d]), np.concatenate([m, empty_m])
    arrivals = np.concatenate([arrivals, np.zeros(len(empty_d), arrivals.dtype)])
    order = np.lexsort((o, d, m))
    return pa.table({
        "origin": _dict(panel.origins, o[order]),
        "destination": _dict(panel.destinations, d[order]),
        "month": _dict(_month_text(panel.months), m[order]),
        "arrivals": pa.array(arrivals[order].astype(np.int64)),
        "published_on": _dates(published, m[order]),
    })


def flows_table(panel: Panel, months: slice, revisions_of: slice | None = None,
                published: list[date] | None = None) -> pa.Table:
    """First releases of `months` plus the restatements of `revisions_of` (published one month later).

    `published` overrides every row's publication date (a monthly drop carries one date)."""
    n_m = len(panel.months)
    first_cells = np.zeros((len(panel.destinations), n_m), bool)
    first_cells[:, months] = True
    first_pub = published or [publication(m) for m in panel.months]
    parts = [_flows_rows(panel, panel.first, first_cells, first_pub)]
    if revisions_of is not None:
        rev_cells = np.zeros_like(first_cells)
        rev_cells[:, revisions_of] = panel.revised[:, revisions_of]
        rev_pub = published or [publication(m, 2) for m in panel.months]
        parts.append(_flows_rows(panel, panel.latest, rev_cells, rev_pub))
    return pa.concat_tables(parts)


def dense_flows_table(panel: Panel, months: slice) -> pa.Table:
    """Every dyad-month written out, zeros included (first releases): the widest legal flows file."""
    n_o, n_d = len(panel.origins), len(panel.destinations)
    month_idx = np.arange(len(panel.months))[months]
    o, d, m = (a.ravel() for a in np.meshgrid(np.arange(n_o), np.arange(n_d), month_idx, indexing="ij"))
    return pa.table({
        "origin": _dict(panel.origins, o), "destination": _dict(panel.destinations, d),
        "month": _dict(_month_text(panel.months), m),
        "arrivals": pa.array(panel.first[o, d, m].astype(np.int64)),
        "published_on": _dates([publication(x) for x in panel.months], m),
    })


def indicator_tables(panel: Panel, months: slice, published: list[date] | None = None) -> dict[str, pa.Table]:
    """Push indicators per origin and pull indicators per destination, published with the flows."""
    rng = np.random.default_rng(panel.spec.seed + 1)
    push, pull = panel.push[:, months], panel.pull[:, months]
    origin_values = {
        "conflict_events": rng.poisson(np.exp(1.5 + 0.8 * push)).astype(float),
        "fatalities": rng.poisson(np.exp(0.5 + 1.1 * push)).astype(float),
        "instability": np.round(50 + 12 * push + rng.normal(0, 4, push.shape), 2),
    }
    destination_values = {
        "recognition_rate": np.round(1 / (1 + np.exp(-(pull * 3 + rng.normal(0, 0.3, pull.shape)))), 4),
        "policy_openness": np.round(50 + 40 * pull + rng.normal(0, 3, pull.shape), 2),
    }
    month_list = panel.months[months]
    pub = published or [publication(m) for m in month_list]
    out = {}
    for kind, countries, values in (("origin_indicators", panel.origins, origin_values),
                                    ("destination_indicators", panel.destinations, destination_values)):
        n_c, n_m = len(countries), len(month_list)
        c, m = (a.ravel() for a in np.meshgrid(np.arange(n_c), np.arange(n_m), indexing="ij"))
        tables = [pa.table({
            "country": _dict(countries, c), "month": _dict(_month_text(month_list), m),
            "indicator": pa.array([name] * len(c)), "value": pa.array(v[c, m]),
            "published_on": _dates(pub, m),
        }) for name, v in values.items()]
        out[kind] = pa.concat_tables(tables)
    return out


def signal_table(panel: Panel, months: slice, published: list[date] | None = None) -> pa.Table:
    """One daily intensity (0-100) per origin that rises a few weeks before its arrivals do."""
    rng = np.random.default_rng(panel.spec.seed + 2)
    month_list = panel.months[months]
    first_day = month_list[0]
    last = month_list[-1]
    end = date(last.year + (last.month == 12), last.month % 12 + 1, 1)
    days = np.arange(np.datetime64(first_day), np.datetime64(end), dtype="datetime64[D]")
    month_of_day = (days.astype("datetime64[M]") - np.datetime64(first_day, "M")).astype(int)
    # leads by about three weeks: the push of the month after, blended in over the last days of a month
    push = panel.push[:, months]
    ahead = np.concatenate([push[:, 1:], push[:, -1:]], axis=1)
    day_in_month = (days - days.astype("datetime64[M]").astype("datetime64[D]")).astype(int)
    blend = np.clip((day_in_month - 8) / 20, 0, 1)
    level = push[:, month_of_day] * (1 - blend) + ahead[:, month_of_day] * blend
    intensity = np.clip(np.round(25 + 12 * level + rng.normal(0, 5, level.shape), 1), 0, 100)
    n_c, n_days = intensity.shape
    c, k = (a.ravel() for a in np.meshgrid(np.arange(n_c), np.arange(n_days), indexing="ij"))
    pub = published or [publication(m) for m in month_list]
    return pa.table({
        "country": _dict(panel.origins, c), "date": pa.array(days[k]), "signal": pa.array([SIGNAL] * len(c)),
        "intensity": pa.array(intensity[c, k]), "published_on": _dates(pub, month_of_day[k]),
    })


def attributes_table(panel: Panel) -> pa.Table:
    n_o, n_d = len(panel.origins), len(panel.destinations)
    o, d = (a.ravel() for a in np.meshgrid(np.arange(n_o), np.arange(n_d), indexing="ij"))
    return pa.table({
        "origin": _dict(panel.origins, o), "destination": _dict(panel.destinations, d),
        "distance_km": pa.array(np.round(panel.distance_km[o, d], 1)),
        "contiguous": pa.array(panel.contiguous[o, d]), "common_language": pa.array(panel.common_language[o, d]),
        "colonial_tie": pa.array(panel.colonial_tie[o, d]), "diaspora": pa.array(panel.diaspora[o, d]),
        "published_on": pa.array(np.full(len(o), np.datetime64(publication(panel.months[0]), "D"))),
    })


# --- files -------------------------------------------------------------------------------------------------

def _write(table: pa.Table, path: Path) -> Path:
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.with_name("." + path.name + ".part")
    pq.write_table(table, tmp, compression="zstd")
    tmp.rename(path)
    return path


def write_history(panel: Panel, directory: Path) -> dict[str, Path]:
    """Every vintage published before the newest month's release: one Parquet file per kind."""
    until = len(panel.months) - 1
    history = slice(0, until)
    tag = _month_text(panel.months)[until - 1]
    tables = {
        "flows": flows_table(panel, history, revisions_of=slice(0, until - 1)),
        **indicator_tables(panel, history),
        "dyad_attributes": attributes_table(panel),
        "signals": signal_table(panel, history),
    }
    return {kind: _write(t, Path(directory) / f"{kind}_history_through_{tag}.parquet") for kind, t in tables.items()}


def write_month(panel: Panel, directory: Path) -> dict[str, Path]:
    """The newest month's drop: its first release, the revision of the month before, its indicators and
    signal days; every file is named with its publication date."""
    n = len(panel.months)
    pub = publication(panel.months[-1])
    newest = slice(n - 1, n)
    tables = {
        "flows": flows_table(panel, newest, revisions_of=slice(n - 2, n - 1), published=[pub] * n),
        **indicator_tables(panel, newest, published=[pub]),
        "signals": signal_table(panel, newest, published=[pub]),
    }
    out = {}
    for kind, table in tables.items():
        table = table.drop_columns(["published_on"])  # the file name carries the date
        out[kind] = _write(table, Path(directory) / f"{kind}_{pub.isoformat()}.parquet")
    return out


def write_dense(panel: Panel, directory: Path) -> Path:
    """Every dyad-month of the whole panel as one flows file (n_dyads x n_months rows)."""
    return _write(dense_flows_table(panel, slice(None)), Path(directory) / "flows_dense_history.parquet")
