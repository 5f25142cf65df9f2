"""Coherent totals: exact means, honest intervals of sums, dependence within origin, and the frame contract."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from dyadcast.distributions import nbinom_p_positive, nbinom_quantiles
from dyadcast.models.base import quantile_column
from dyadcast.models.conformal import estimate_origin_rho
from dyadcast.totals import aggregate_totals, fit_hurdle_nb, with_totals

LEVELS = (0.05, 0.25, 0.5, 0.75, 0.95)
QCOLS = [quantile_column(q) for q in LEVELS]


def nb_forecast(mu: np.ndarray, alpha: np.ndarray, origins: list[str], dests: list[str], horizon: int = 1,
                ) -> pd.DataFrame:
    """Forecast rows exactly as an NB model would write them (invented codes)."""
    q = nbinom_quantiles(mu, alpha, LEVELS)
    out = pd.DataFrame({"origin": origins, "destination": dests, "horizon": horizon,
                        "target_month": pd.Timestamp("2031-01-01") + pd.DateOffset(months=horizon - 1),
                        "mean": mu})
    out[QCOLS] = q
    out["p_positive"] = nbinom_p_positive(mu, alpha)
    return out


@pytest.fixture(scope="module")
def grid() -> tuple[pd.DataFrame, np.ndarray, np.ndarray]:
    """8 origins x 25 destinations, independent NB2 dyads with mixed means and dispersions."""
    rng = np.random.default_rng(11)
    origins = [f"X{chr(65 + i)}A" for i in range(8)]
    dests = [f"Q{chr(77 + j // 26)}{chr(65 + j % 26)}" for j in range(25)]
    o, d = np.meshgrid(origins, dests, indexing="ij")
    mu = rng.gamma(0.7, 6.0, o.size)
    alpha = rng.choice([0.2, 0.6, 1.5], o.size)
    return nb_forecast(mu, alpha, list(o.ravel()), list(d.ravel())), mu, alpha


def test_frame_contract_and_exact_means(grid):
    frame, mu, _ = grid
    two = pd.concat([frame, frame.assign(horizon=2, target_month=pd.Timestamp("2031-02-01"))])
    tot = aggregate_totals(two, LEVELS, n_draws=400, rho=0.2, seed=3)
    assert list(tot.columns) == ["level", "origin", "destination", "horizon", "target_month", "mean", *QCOLS,
                                 "p_positive"]
    per_h = tot[tot["horizon"] == 1]
    assert (per_h["level"] == "origin_total").sum() == 8 and (per_h["level"] == "destination_total").sum() == 25
    world = per_h[per_h["level"] == "world_total"].iloc[0]
    assert world["origin"] == "*" and world["destination"] == "*"
    assert (per_h.loc[per_h["level"] == "origin_total", "destination"] == "*").all()
    assert (per_h.loc[per_h["level"] == "destination_total", "origin"] == "*").all()
    # the mean of a total is the exact sum of the dyad means, not a sampled value
    assert world["mean"] == pytest.approx(mu.sum(), rel=1e-12)
    by_origin = frame.groupby("origin")["mean"].sum()
    got = per_h[per_h["level"] == "origin_total"].set_index("origin")["mean"]
    np.testing.assert_allclose(got.loc[by_origin.index], by_origin, rtol=1e-12)
    by_dest = frame.groupby("destination")["mean"].sum()
    got = per_h[per_h["level"] == "destination_total"].set_index("destination")["mean"]
    np.testing.assert_allclose(got.loc[by_dest.index], by_dest, rtol=1e-12)
    q = tot[QCOLS].to_numpy()
    assert (np.diff(q, axis=1) >= 0).all() and (q >= 0).all()


def test_nb_rows_are_read_back_exactly(grid):
    frame, mu, alpha = grid
    m, a = fit_hurdle_nb(frame["mean"].to_numpy(), frame["p_positive"].to_numpy(), frame[QCOLS].to_numpy(), LEVELS)
    np.testing.assert_allclose(m, mu, rtol=1e-12)
    np.testing.assert_allclose(a, alpha, rtol=1e-6)


def test_independent_totals_cover_and_are_narrower_than_summed_quantiles(grid):
    frame, mu, alpha = grid
    tot = aggregate_totals(frame, LEVELS, n_draws=2000, rho=0.0, seed=5)
    world = tot[tot["level"] == "world_total"].iloc[0]
    # a sum of independent dyads is relatively less spread than lock-step dyads (summed quantiles)
    assert world["q950"] < frame["q950"].sum() and world["q050"] > frame["q050"].sum()
    assert world["q950"] - world["q050"] < 0.5 * (frame["q950"].sum() - frame["q050"].sum())
    assert world["q050"] <= world["mean"] <= world["q950"]
    # coverage against fresh independent NB2 draws from numpy's own sampler
    rng = np.random.default_rng(123)
    reps = rng.negative_binomial(1 / alpha, 1 / (1 + alpha * mu), size=(1500, mu.size))
    world_sum = reps.sum(axis=1)
    cover = np.mean((world_sum >= world["q050"]) & (world_sum <= world["q950"]))
    assert 0.85 <= cover <= 0.95, cover
    origin_tot = tot[tot["level"] == "origin_total"].set_index("origin")
    codes = frame["origin"].to_numpy()
    hits = []
    for origin, row in origin_tot.iterrows():
        s = reps[:, codes == origin].sum(axis=1)
        hits.append((s >= row["q050"]) & (s <= row["q950"]))
    assert 0.85 <= np.mean(hits) <= 0.95, np.mean(hits)


def test_world_interval_contains_sum_of_medians_for_near_symmetric_dyads():
    """Sanity: with large, mildly dispersed flows (median ~ mean) the summed medians sit inside the interval.

    (For skewed small flows the summed medians fall below the total's interval, as they should.)
    """
    rng = np.random.default_rng(8)
    n = 120
    frame = nb_forecast(rng.uniform(50, 200, n), np.full(n, 0.05), [f"X{chr(65 + i % 6)}A" for i in range(n)],
                        [f"QM{chr(65 + i % 20)}" for i in range(n)])
    world = aggregate_totals(frame, LEVELS, n_draws=1000, rho=0.2).query("level == 'world_total'").iloc[0]
    assert world["q050"] <= frame["q500"].sum() <= world["q950"]
    assert world["q050"] < world["q500"] < world["q950"]


def test_origin_correlation_widens_origin_totals_only_through_rho(grid):
    frame, _, _ = grid
    indep = aggregate_totals(frame, LEVELS, n_draws=1500, rho=0.0, seed=1)
    shock = aggregate_totals(frame, LEVELS, n_draws=1500, rho=0.6, seed=1)
    width = {name: (t.loc[t["level"] == "origin_total", "q950"] - t.loc[t["level"] == "origin_total", "q050"]).mean()
             for name, t in (("indep", indep), ("shock", shock))}
    assert width["shock"] > 1.2 * width["indep"]
    np.testing.assert_allclose(indep["mean"], shock["mean"])  # dependence never moves the mean


def test_result_does_not_depend_on_chunking_or_row_order(grid):
    frame, _, _ = grid
    a = aggregate_totals(frame, LEVELS, n_draws=300, rho=0.3, seed=9)
    b = aggregate_totals(frame.sample(frac=1.0, random_state=1), LEVELS, n_draws=300, rho=0.3, seed=9,
                         chunk_cells=300 * 30)
    pd.testing.assert_frame_equal(a, b)


def test_rare_dyads_p_positive_matches_independent_product():
    """Dormant-like rows (all quantiles 0): P(total > 0) = 1 - prod(1 - p_i) under independence."""
    n = 400
    rows = pd.DataFrame({"origin": [f"X{chr(65 + i % 4)}A" for i in range(n)],
                         "destination": [f"Q{chr(77 + (i // 4) // 26)}{chr(65 + (i // 4) % 26)}" for i in range(n)],
                         "horizon": 1, "target_month": pd.Timestamp("2031-01-01"), "mean": 0.006})
    rows[QCOLS] = 0.0
    rows["p_positive"] = 0.002
    tot = aggregate_totals(rows, LEVELS, n_draws=4000, rho=0.0, seed=2)
    world = tot[tot["level"] == "world_total"].iloc[0]
    expected = 1 - (1 - 0.002) ** n  # 0.551
    assert world["p_positive"] == pytest.approx(expected, abs=3 * np.sqrt(expected * (1 - expected) / 4000))
    per_dest = tot[tot["level"] == "destination_total"]["p_positive"]
    assert (per_dest >= 0.002 - 1e-12).all() and (per_dest <= 4 * 0.002 + 1e-12).all()  # [max p_i, sum p_i], 4 dyads each


def test_zero_mean_row_with_positive_chance_draws_ones():
    """A baseline's zero point forecast with P(>0) > 0: positives at the smallest count, mean stays 0."""
    rows = pd.DataFrame({"origin": ["XAA"] * 50, "destination": [f"QM{chr(65 + i % 26)}{i}" for i in range(50)],
                         "horizon": 1, "target_month": pd.Timestamp("2031-01-01"), "mean": 0.0})
    rows[QCOLS] = [0, 0, 0, 0, 1]
    rows["p_positive"] = 0.1
    world = aggregate_totals(rows, LEVELS, n_draws=2000, rho=0.0, seed=0).query("level == 'world_total'").iloc[0]
    assert world["mean"] == 0.0
    assert world["q500"] == pytest.approx(5, abs=1)  # Binomial(50, 0.1) median 5
    assert world["p_positive"] == pytest.approx(1 - 0.9**50, abs=0.01)


@pytest.mark.parametrize(("mu", "alpha"), [(3.0, 0.8), (80.0, 0.3), (20_000.0, 0.02)])
def test_total_of_one_dyad_is_that_dyad(mu, alpha):
    """Small flows go through the CDF tables, crisis-sized ones through scipy's exact inverse CDF."""
    frame = nb_forecast(np.array([mu]), np.array([alpha]), ["XAA"], ["QMA"])
    tot = aggregate_totals(frame, LEVELS, n_draws=3000, rho=0.3, seed=4)
    assert len(tot) == 3
    for _, row in tot.iterrows():
        got, want = row[QCOLS].to_numpy(dtype=float), frame[QCOLS].to_numpy(dtype=float)[0]
        assert np.all(np.abs(got - want) <= np.maximum(1.0, 0.03 * want)), (got, want)
        assert row["p_positive"] == pytest.approx(frame["p_positive"].iloc[0])


def test_with_totals_stacks_levels(grid):
    frame, _, _ = grid
    out = with_totals(frame, LEVELS, n_draws=200)
    assert out["level"].value_counts().to_dict() == {"dyad": 200, "destination_total": 25, "origin_total": 8,
                                                     "world_total": 1}


@pytest.mark.parametrize(("rho", "alpha"), [(0.0, 0.5), (0.1, 0.3), (0.35, 1.0)])
def test_estimate_origin_rho_recovers_the_copula_correlation(rho, alpha):
    """NB2 counts drawn through a Gaussian copula (scipy's nbinom.ppf as an independent sampler)."""
    from scipy import special, stats

    rng = np.random.default_rng(4)
    n_orig, n_dest, n_month = 20, 15, 24
    mu = rng.gamma(2.0, 5.0, (n_orig, n_dest, 1)) * np.ones((1, 1, n_month))
    z = np.sqrt(rho) * rng.standard_normal((n_orig, 1, n_month)) + np.sqrt(1 - rho) * rng.standard_normal(mu.shape)
    y = stats.nbinom.ppf(special.ndtr(z), 1 / alpha, 1 / (1 + alpha * mu))
    origin = np.broadcast_to(np.arange(n_orig)[:, None, None], mu.shape).ravel()
    month = np.broadcast_to(np.arange(n_month)[None, None, :], mu.shape).ravel()
    est = estimate_origin_rho(y.ravel(), mu.ravel(), alpha, origin, month)
    # first-order in rho, so it leans high as rho grows (wider, i.e. conservative, totals): over 8 seeds the
    # mean was 0.106 (sd 0.013) for rho 0.1 and 0.387 (sd 0.03) for rho 0.35 with alpha 1
    assert est == pytest.approx(rho, abs=0.03 + 0.2 * rho), est


def test_copula_weight_matches_simulation():
    """Corr(F^-1(Phi(Z)), Z) for NB2 margins, closed form vs 200,000 simulated pairs."""
    from scipy import special, stats

    from dyadcast.models.conformal import copula_weight

    z = np.random.default_rng(0).standard_normal(200_000)
    for mu, alpha in ((0.3, 0.5), (1.0, 0.5), (5.0, 0.5), (40.0, 2.0)):
        y = stats.nbinom.ppf(special.ndtr(z), 1 / alpha, 1 / (1 + alpha * mu))
        assert copula_weight(np.array([mu]), np.array([alpha]))[0] == pytest.approx(np.corrcoef(y, z)[0, 1], abs=0.01)


def test_rho_per_horizon(grid):
    frame, _, _ = grid
    two = pd.concat([frame, frame.assign(horizon=2, target_month=pd.Timestamp("2031-02-01"))])
    tot = aggregate_totals(two, LEVELS, n_draws=800, rho={"1": 0.0, "2": 0.6}, seed=1)
    o = tot[tot["level"] == "origin_total"]
    width = (o["q950"] - o["q050"]).groupby(o["horizon"]).mean()
    assert width.loc[2] > 1.2 * width.loc[1]


def test_bad_input_names_the_problem(grid):
    frame, _, _ = grid
    with pytest.raises(ValueError, match="lacks columns"):
        aggregate_totals(frame.drop(columns="q950"), LEVELS)
    with pytest.raises(ValueError, match="rho"):
        aggregate_totals(frame, LEVELS, rho=1.0)


def test_copula_weight_sparse_sum_equals_the_full_sum():
    """The geometric grid with the Euler-Maclaurin rule reproduces the sum over every count (heavy tails too)."""
    from dyadcast.models.conformal import _copula_weight

    mu = np.logspace(-3, 3, 60)
    for alpha in (0.05, 1.0, 7.0, 20.0):
        a = np.full(mu.size, alpha)
        fast = _copula_weight(mu, a)
        full = _copula_weight(mu, a, dense=10**7, sparse=10)  # every count up to the 1 - 1e-7 quantile
        np.testing.assert_allclose(fast, full, rtol=1e-4)


@pytest.mark.parametrize(("mu", "alpha", "n_draws"), [(3.0, 0.8, 2000), (40.0, 3.0, 2000), (2_000.0, 0.3, 2000),
                                                    (5_000.0, 2.0, 5000), (30_000.0, 20.0, 2000),
                                                    (3_000.0, 1e-4, 2000), (50_000.0, 1e-4, 2000),
                                                    (17_167.0, 1e-4, 2000)])
def test_draws_are_nb_quantiles_of_their_copula_normals(mu, alpha, n_draws):
    """Each draw is the NB quantile of its copula normal: exact up to EXACT_UP_TO, interpolated above.

    Reference: scipy.stats.nbinom.ppf of the same normals (rebuilt from the generator), compared at 99 order
    statistics. 5,000 draws take the 64-bit path of the sort keys. The nearly Poisson rows (alpha 1e-4) have
    knots tens of sd away, where P(draw > k) rounds to 1 or 0: their draws used to come out NaN; at 17,167 the
    knot two above the mass is out of reach too, so the Wilson-Hilferty slope carries the draws.
    """
    from scipy import special, stats

    from dyadcast.totals import EXACT_UP_TO, _box_muller

    levels = np.linspace(0.01, 0.99, 99)
    frame = pd.concat([nb_forecast(np.array([mu]), np.array([alpha]), ["XAA"], ["QMA"])[
        ["origin", "destination", "horizon", "target_month", "mean", "p_positive"]],
        pd.DataFrame(nbinom_quantiles(np.array([mu]), np.array([alpha]), levels),
                     columns=[quantile_column(q) for q in levels])], axis=1)
    world = aggregate_totals(frame, levels, n_draws=n_draws, rho=0.0, seed=6).query("level == 'world_total'")
    ours = world[[quantile_column(q) for q in levels]].to_numpy()[0]
    z = _box_muller(np.random.default_rng([6, 0]), 2, n_draws)[1].astype(float)  # rho 0: the dyad's own normals
    exact = np.quantile(stats.nbinom.ppf(special.ndtr(z), 1 / alpha, 1 / (1 + alpha * mu)), levels,
                        method="inverted_cdf")
    small = exact <= EXACT_UP_TO
    np.testing.assert_array_equal(ours[small], exact[small])
    assert np.all(np.abs(ours[~small] - exact[~small]) <= np.maximum(1.0, 0.005 * exact[~small])), (ours, exact)


def test_large_flows_are_unbiased_against_scipy():
    """Heavy-tailed crisis-sized dyads (interpolated draws): the mean and upper quantiles of many draws agree
    with scipy.stats.nbinom within Monte-Carlo error (300 independent origins x 2,000 draws)."""
    from scipy import stats

    mu, alpha, n = 20_000.0, 5.0, 300
    frame = nb_forecast(np.full(n, mu), np.full(n, alpha), [f"O{i:03d}" for i in range(n)], ["QMA"] * n)
    tot = aggregate_totals(frame, LEVELS, n_draws=2000, rho=0.0, seed=8)
    origins = tot[tot["level"] == "origin_total"]
    exact = stats.nbinom.ppf([0.75, 0.95], 1 / alpha, 1 / (1 + alpha * mu))
    for col, want in zip(("q750", "q950"), exact, strict=True):
        got = origins[col].to_numpy()
        assert abs(got.mean() - want) <= 4 * got.std() / np.sqrt(n) + 0.002 * want, (col, got.mean(), want)


def test_a_dyad_listed_twice_counts_twice():
    """Two rows of one dyad are two dyads (as before): twice the mean, and independent draws, not one doubled."""
    from scipy import stats

    frame = nb_forecast(np.array([50.0]), np.array([0.5]), ["XAA"], ["QMA"])
    twice = aggregate_totals(pd.concat([frame, frame]), LEVELS, n_draws=4000, rho=0.0, seed=1)
    world = twice[twice["level"] == "world_total"].iloc[0]
    assert world["mean"] == pytest.approx(100.0)
    # sum of two independent NB2(50, 0.5) is NB2 with n = 4, mean 100 (common knowledge of the NB family)
    want = stats.nbinom.ppf([0.05, 0.5, 0.95], 4, 4 / (4 + 100))
    got = world[["q050", "q500", "q950"]].to_numpy(dtype=float)
    assert np.all(np.abs(got - want) <= 0.06 * want), (got, want)
