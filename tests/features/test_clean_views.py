"""Vintages, implied zeros and the dyad universe (sql/20_*), on hand-made loads with hand-worked answers."""

from __future__ import annotations

from datetime import date

import pytest
from _feature_warehouse import insert


def _rows(con, sql: str, params=None) -> set[tuple]:
    return {tuple(r) for r in con.sql(sql, params=params).fetchall()}


@pytest.fixture
def loads(con):
    """Three flows loads and one attribute load.

    load 1 (pub 2024-02-10): XAA 2024-01: QAA 5                       (QAB not listed)
    load 2 (pub 2024-03-10): XAA 2024-02: QAB 3; XAB 2024-02: QAA 7
    load 3 (pub 2024-04-10): XAA 2024-01 revised: QAA 6, QAB 1
    load 4 (pub 2024-01-01): attributes of QAB->XAB (never listed in flows)
    """
    insert(con, "raw_flows", [
        (1, "2024-02-10", "QAA", "XAA", "2024-01-01", 5),
        (2, "2024-03-10", "QAB", "XAA", "2024-02-01", 3),
        (2, "2024-03-10", "QAA", "XAB", "2024-02-01", 7),
        (3, "2024-04-10", "QAA", "XAA", "2024-01-01", 6),
        (3, "2024-04-10", "QAB", "XAA", "2024-01-01", 1),
    ])
    insert(con, "raw_dyad_attributes", [(4, "2024-01-01", "QAB", "XAB", 800.0, 1, 1, 0, 10.0)])
    return con


def test_actuals_latest_has_revisions_and_implied_zeros(loads):
    got = _rows(loads, "SELECT origin, destination, month, arrivals, load_id FROM actuals_latest")
    assert got == {
        ("QAA", "XAA", date(2024, 1, 1), 6, 3),
        ("QAB", "XAA", date(2024, 1, 1), 1, 3),
        ("QAA", "XAA", date(2024, 2, 1), 0, 2),  # implied zero: load 2 reports XAA 2024-02 without QAA
        ("QAB", "XAA", date(2024, 2, 1), 3, 2),
        ("QAA", "XAB", date(2024, 2, 1), 7, 2),
        ("QAB", "XAB", date(2024, 2, 1), 0, 2),  # implied zero for a dyad known only from attributes
    }  # XAB 2024-01 is reported by no load: missing, so no row at all


def test_actuals_first_release_keeps_the_earliest_vintage(loads):
    got = _rows(loads, "SELECT origin, destination, month, arrivals, load_id, published_on FROM actuals_first_release")
    assert ("QAA", "XAA", date(2024, 1, 1), 5, 1, date(2024, 2, 10)) in got
    assert ("QAB", "XAA", date(2024, 1, 1), 0, 1, date(2024, 2, 10)) in got  # not listed in load 1: zero
    assert len(got) == 6


def test_actuals_as_of_sees_only_what_was_published(loads):
    march = _rows(loads, "SELECT origin, destination, month, arrivals FROM actuals_as_of(DATE '2024-03-31')")
    assert ("QAA", "XAA", date(2024, 1, 1), 5) in march  # revision of 2024-04-10 not yet published
    assert len(march) == 6
    # On 2024-02-15 only load 1 and the attributes exist: QAB->XAA is not yet in the universe.
    february = _rows(loads, "SELECT origin, destination, month, arrivals FROM actuals_as_of(DATE '2024-02-15')")
    assert february == {("QAA", "XAA", date(2024, 1, 1), 5)}
    assert _rows(loads, "SELECT * FROM actuals_as_of(DATE '2024-02-09')") == set()


def test_ties_on_published_on_go_to_the_higher_load(con):
    insert(con, "raw_flows", [
        (8, "2024-05-01", "QAA", "XAA", "2024-04-01", 10),
        (9, "2024-05-01", "QAA", "XAA", "2024-04-01", 12),
    ])
    assert _rows(con, "SELECT arrivals, load_id FROM actuals_latest") == {(12, 9)}
    assert _rows(con, "SELECT arrivals, load_id FROM actuals_first_release") == {(10, 8)}


def test_vintage_history_and_universe(loads):
    history = _rows(loads, "SELECT destination, month, load_id, recency, release_number "
                           "FROM flow_vintages_as_of(DATE '2024-12-31')")
    assert history == {
        ("XAA", date(2024, 1, 1), 1, 2, 1),
        ("XAA", date(2024, 1, 1), 3, 1, 2),
        ("XAA", date(2024, 2, 1), 2, 1, 1),
        ("XAB", date(2024, 2, 1), 2, 1, 1),
    }
    assert _rows(loads, "FROM dyads_as_of(DATE '2024-02-15')") == {("QAA", "XAA", 1), ("QAB", "XAB", 2)}


def test_panel_marks_missing_months_as_null(loads):
    got = _rows(loads, "SELECT origin, destination, month, arrivals FROM panel_as_of(DATE '2024-12-31', DATE '2024-02-01')")
    assert len(got) == 8  # 4 dyads x 2 months, dense
    assert ("QAA", "XAB", date(2024, 1, 1), None) in got  # XAB 2024-01 never reported: NULL, not 0
    assert ("QAA", "XAA", date(2024, 2, 1), 0) in got
    # cutoff before the last reported month truncates the panel
    assert {r[0] for r in _rows(loads, "SELECT month FROM panel_as_of(DATE '2024-12-31', DATE '2024-01-01')")} == {date(2024, 1, 1)}


def test_latest_indicator_and_attribute_values_win(con):
    insert(con, "raw_origin_indicators", [
        (1, "2024-02-01", "QAA", "2024-01-01", "conflict", 10.0),
        (2, "2024-03-01", "QAA", "2024-01-01", "conflict", 12.0),
    ])
    insert(con, "raw_dyad_attributes", [
        (3, "2024-01-01", "QAA", "XAA", 500.0, 0, 0, 0, 5.0),
        (4, "2024-06-01", "QAA", "XAA", 550.0, 0, 1, 0, 6.0),
    ])
    assert _rows(con, "SELECT value FROM origin_indicators_as_of(DATE '2024-02-15')") == {(10.0,)}
    assert _rows(con, "SELECT value FROM origin_indicators_as_of(DATE '2024-03-01')") == {(12.0,)}
    assert _rows(con, "SELECT distance_km FROM dyad_attributes_as_of(DATE '2024-05-31')") == {(500.0,)}
    assert _rows(con, "SELECT distance_km FROM dyad_attributes_as_of(DATE '2024-06-01')") == {(550.0,)}
