"""No leakage: features for (cutoff C, as-of D) are the same whether or not rows published after D are loaded."""

from __future__ import annotations

from datetime import date, timedelta

import pandas as pd
import pytest
from _feature_warehouse import load_drops, new_warehouse, random_drops
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from dyadcast.features import FeatureError, build_features
from dyadcast.months import add_months

FIRST = date(2022, 1, 1)


@pytest.fixture(scope="module")
def shared():
    connection = new_warehouse()
    yield connection
    connection.close()


def features_or_error(con, cutoff: date, as_of: date, start: date | None):
    try:
        fs = build_features(con, cutoff, as_of, horizon=3, start=start)
    except FeatureError as exc:
        return str(exc), None
    metadata = {k: v for k, v in fs.metadata.items() if k != "build_seconds"}
    return fs.frame, metadata


@settings(max_examples=20, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(
    seed=st.integers(0, 10_000),
    cutoff_offset=st.integers(0, 13),
    as_of_days=st.integers(0, 150),
    start_offset=st.one_of(st.none(), st.integers(0, 13)),
)
def test_rows_published_after_as_of_change_nothing(shared, seed, cutoff_offset, as_of_days, start_offset):
    drops = random_drops(seed, n_months=14)
    cutoff = add_months(FIRST, cutoff_offset)
    as_of = cutoff + timedelta(days=as_of_days)
    start = None if start_offset is None else add_months(FIRST, min(start_offset, cutoff_offset))
    load_drops(shared, drops)
    everything = features_or_error(shared, cutoff, as_of, start)
    actuals_all = shared.sql("FROM actuals_as_of(?) ORDER BY ALL", params=[as_of]).df()
    load_drops(shared, drops, as_of=as_of)
    visible_only = features_or_error(shared, cutoff, as_of, start)
    actuals_visible = shared.sql("FROM actuals_as_of(?) ORDER BY ALL", params=[as_of]).df()

    pd.testing.assert_frame_equal(actuals_all, actuals_visible)
    if isinstance(everything[0], str):
        assert everything[0] == visible_only[0]
        return
    pd.testing.assert_frame_equal(everything[0], visible_only[0])
    assert everything[1] == visible_only[1]  # signal lead, window and evidence included


def test_future_rows_would_be_seen_without_the_as_of_filter(shared):
    """Guard that the property above can fail: a later as-of does change the features."""
    drops = random_drops(5, n_months=14)
    load_drops(shared, drops)
    cutoff = date(2022, 8, 1)
    early = build_features(shared, cutoff, date(2022, 8, 15), horizon=3).frame
    late = build_features(shared, cutoff, date(2023, 3, 1), horizon=3).frame
    assert not early.equals(late)
