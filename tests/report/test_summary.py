"""The plain-language findings: which model to trust per horizon, honesty of the ranges, pooling."""

from __future__ import annotations

import pandas as pd
import pytest

from dyadcast.report.summary import MIN_COMMON, choices, coverage_sentence, pooled, trust_sentence


def skill(rows: list[tuple[str, int, float, int]]) -> pd.DataFrame:
    frame = pd.DataFrame(rows, columns=["model", "horizon", "relative_wis", "n_common"])
    return frame.assign(level="dyad", vintage="latest")


def test_sentence_groups_adjacent_horizons_and_names_the_gain() -> None:
    frame = skill([
        ("persistence", 1, 1.0, 500), ("glm", 1, 0.8, 500), ("gbm", 1, 0.9, 500),
        ("persistence", 2, 1.0, 400), ("glm", 2, 0.9, 400), ("gbm", 2, 0.95, 400),
        ("glm", 3, 0.97, 300), ("gbm", 3, 0.85, 300),
        ("glm", 4, 1.10, 200), ("gbm", 4, 1.30, 200),
        ("glm", 5, 0.50, MIN_COMMON - 1), ("gbm", 5, 0.60, 3),
    ])
    assert trust_sentence(frame) == (
        "Trust glm for 1–2 months ahead (its interval score is 10–20 % lower than persistence's); "
        "gbm for 3 months ahead (its interval score is 15 % lower than persistence's); "
        "persistence (last month's figure) for 4 months ahead, where no model beat it; "
        "too few forecasts have been scored yet to judge 5 months ahead."
    )


def test_same_model_at_separate_horizons_is_named_twice() -> None:
    frame = skill([("a", 1, 0.7, 100), ("b", 1, 0.8, 100), ("a", 2, 0.9, 100), ("b", 2, 0.6, 100),
                   ("a", 3, 0.5, 100), ("b", 3, 0.9, 100)])
    assert [(c.horizon, c.model) for c in choices(frame)] == [(1, "a"), (2, "b"), (3, "a")]
    assert trust_sentence(frame).count("a for") == 2


def test_only_rows_of_dyads_and_the_latest_revision_count() -> None:
    frame = pd.concat([
        skill([("a", 1, 0.5, 100)]),
        skill([("b", 1, 0.1, 100)]).assign(vintage="first_release"),
        skill([("c", 1, 0.1, 100)]).assign(level="world_total"),
    ])
    assert [c.model for c in choices(frame)] == ["a"]


def test_sentences_when_there_is_no_evidence() -> None:
    assert trust_sentence(pd.DataFrame()).startswith("No forecast has been scored yet")
    assert trust_sentence(skill([("a", 1, 0.5, 2)])).startswith("Too few forecasts have been scored yet")


@pytest.mark.parametrize("cov90, verdict", [(0.88, "about right"), (0.70, "too narrow"), (0.99, "wider than needed")])
def test_coverage_verdicts(cov90, verdict) -> None:
    rows = pd.DataFrame({"model": ["m"], "horizon": [1], "n": [200], "coverage_50": [0.5], "coverage_90": [cov90]})
    text = coverage_sentence(rows, "m")
    assert verdict in text and f"{100 * cov90:.0f} % of 200 scored forecasts" in text


def test_pooling_weights_cutoffs_by_their_counts() -> None:
    """Hand-computed: cutoffs with n = 10 and 30, coverage 0.5 and 0.9 pool to (5 + 27) / 40 = 0.8;
    rmse 2 and 4 pool to sqrt((10·4 + 30·16) / 40) = sqrt(13)."""
    overview = pd.DataFrame({
        "model": ["m", "m"], "horizon": [1, 1], "cutoff": ["2025-01-01", "2025-02-01"], "level": "dyad",
        "vintage": "latest", "n": [10, 30], "mae": [1.0, 3.0], "rmse": [2.0, 4.0], "mean_wis": [1.0, 2.0],
        "bias": [0.0, 4.0], "coverage_50": [0.2, 0.6], "coverage_90": [0.5, 0.9],
    })
    out = pooled(overview).iloc[0]
    assert out["n"] == 40 and out["coverage_90"] == pytest.approx(0.8) and out["mae"] == pytest.approx(2.5)
    assert out["rmse"] == pytest.approx(13 ** 0.5) and out["bias"] == pytest.approx(3.0)
