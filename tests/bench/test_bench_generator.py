"""The global panel generator: deterministic, invented codes only, and files that mean what it simulated.

The strongest check loads the files through the ingest's reader and loader and asks the warehouse's own
vintage views (sql/20_*) for the first release and the latest revision: they must give back exactly the
arrays the generator drew, which proves the explicit-zero rows and the revision files follow the contract.
"""

from __future__ import annotations

import re

import global_panel as gp
import numpy as np
import pyarrow.parquet as pq
import pytest
from _tiny_warehouse import tiny_warehouse

USER_ASSIGNED = re.compile(r"^(?:AA[A-Z]|Q[M-Z][A-Z]|X[A-Z]{2}|ZZ[A-Z])$")  # ISO 3166-1 user-assigned alpha-3


def test_same_seed_same_world_other_seed_other_world():
    a, b, c = gp.simulate(gp.tiny(7)), gp.simulate(gp.tiny(7)), gp.simulate(gp.tiny(8))
    assert np.array_equal(a.latest, b.latest) and np.array_equal(a.first, b.first)
    assert not np.array_equal(a.latest, c.latest)


def test_codes_are_user_assigned_and_distinct():
    spec = gp.FULL
    origins, destinations = gp.origin_codes(spec), gp.destination_codes(spec)
    assert len(set(origins)) == 200 and len(set(destinations)) == 200
    assert all(USER_ASSIGNED.match(c) for c in origins + destinations)
    assert spec.n_dyads * spec.n_months == 9_600_000
    with pytest.raises(ValueError, match="user-assigned codes"):
        gp.codes("Q", "MA", 365)  # QMA-QZZ holds 364


def test_zero_share_and_revisions_match_the_spec():
    panel = gp.simulate(gp.SMALL)
    assert abs(panel.zero_share - 0.80) < 0.02
    assert abs(panel.revised[:, :-1].mean() - gp.SMALL.revision_share) < 0.05
    assert not panel.revised[:, -1].any()
    assert (panel.first <= panel.latest).all() and (panel.first < panel.latest).any()


def _cube(con, view: str, panel: gp.Panel) -> np.ndarray:
    rows = con.sql(f"SELECT origin, destination, month, arrivals FROM {view}").df()
    o = rows["origin"].map({c: i for i, c in enumerate(panel.origins)}).to_numpy()
    d = rows["destination"].map({c: i for i, c in enumerate(panel.destinations)}).to_numpy()
    first = panel.months[0]
    m = ((rows["month"].dt.year - first.year) * 12 + rows["month"].dt.month - first.month).to_numpy()
    cube = np.full(panel.latest.shape, -1, dtype=np.int64)
    cube[o, d, m] = rows["arrivals"].to_numpy()
    return cube


def test_warehouse_views_give_back_the_simulated_vintages(tmp_path):
    con, panel = tiny_warehouse(tmp_path, gp.tiny(11))
    assert np.array_equal(_cube(con, "actuals_latest", panel), panel.latest)
    assert np.array_equal(_cube(con, "actuals_first_release", panel), panel.first)
    zero_rows = con.sql("SELECT count(*) FROM raw_flows WHERE arrivals = 0").fetchall()[0][0]
    empty_first = int((~(panel.first > 0).any(axis=0)).sum())
    empty_revised = int((~(panel.latest > 0).any(axis=0) & panel.revised).sum())
    assert zero_rows == empty_first + empty_revised
    kinds = {r[0] for r in con.sql("SELECT kind FROM loads").fetchall()}
    assert kinds == {"flows", "origin_indicators", "destination_indicators", "dyad_attributes", "signals"}


def test_monthly_drop_holds_the_new_month_and_one_revision(tmp_path):
    panel = gp.simulate(gp.tiny(5))
    files = gp.write_month(panel, tmp_path)
    pub = gp.publication(panel.months[-1]).isoformat()
    assert all(p.name.endswith(f"_{pub}.parquet") for p in files.values())
    flows = pq.read_table(files["flows"]).to_pandas()
    months = sorted(flows["month"].astype(str).unique())
    assert months == [f"{m:%Y-%m}" for m in panel.months[-2:]]
    revised_destinations = {panel.destinations[d] for d in np.nonzero(panel.revised[:, -2])[0]}
    older = flows[flows["month"].astype(str) == months[0]]
    assert set(older["destination"].astype(str)) == revised_destinations


def test_seeded_runs_score_and_copied_state_matches_real_scoring(tmp_path):
    """Copies index like model snapshots; the copied scored state has the rows and checks real scoring gives."""
    from seed_runs import copy_scored_state, plan, seed_runs, source_forecast

    from dyadcast.scoring import score_pending

    con, panel = tiny_warehouse(tmp_path, gp.tiny(2))
    newest = panel.months[-2]
    forecast = source_forecast(con, newest, gp.publication(newest), horizon=3)
    n_o, n_d = len(panel.origins), len(panel.destinations)
    assert len(forecast) == (n_o * n_d + n_o + n_d + 1) * 3
    runs = plan(panel.months[-4], 6, ("persistence", "tweedie_gbm"))  # cutoffs -4, -5, -6: targets known
    runs += plan(panel.months[-1], 2, ("persistence", "tweedie_gbm"))  # the newest: nothing to score yet
    as_of = {c: gp.publication(c) for c, _ in runs}
    templates = seed_runs(con, str(tmp_path / "snapshots"), forecast, runs[:2], as_of)
    assert score_pending(con, tmp_path / "accuracy").rows_written > 0
    others = seed_runs(con, str(tmp_path / "snapshots"), forecast, runs[2:], as_of)
    assert con.sql("SELECT count(*) FROM forecast_rows").fetchall()[0][0] == 8 * len(forecast)
    copied = copy_scored_state(con, str(tmp_path / "accuracy"), {t.model: t.run_id for t in templates},
                               [r.run_id for r in others], newest)
    per_run = con.sql("SELECT run_id, count(*) FROM accuracy_rows GROUP BY run_id").fetchall()
    assert copied > 0 and len({n for _, n in per_run}) == 1 and len(per_run) == 6  # same rows per run
    assert score_pending(con, tmp_path / "accuracy").rows_written == 0  # nothing left due: checks are real
    assert con.sql("SELECT count(*) FROM run_naive_scales").fetchall()[0][0] == 6 * 4  # four levels, scored runs
