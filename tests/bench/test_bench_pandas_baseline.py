"""The pandas baseline of the benchmark gives the SQL feature macro's values, row for row and cell for cell.

pandas (groupby + shift + rolling with min_periods=1, pandas.pydata.org "Windowing operations") is the
outside reference here; the vintage rules are re-derived from DEVELOPERS.md ("Vintage semantics"). If the
two disagree, the ratio the benchmark reports compares different work, so the test guards both.
"""

from __future__ import annotations

import global_panel as gp
import numpy as np
import pandas_features as pf
import pytest
from _tiny_warehouse import tiny_warehouse

from dyadcast.months import add_months


@pytest.fixture(scope="module")
def warehouse(tmp_path_factory):
    con, panel = tiny_warehouse(tmp_path_factory.mktemp("tiny"), gp.tiny(3))
    yield con, panel
    con.close()


def _cases(panel: gp.Panel):
    months = panel.months
    return [
        (months[-1], gp.publication(months[-1]), None),  # everything, newest month
        (months[-3], gp.publication(months[-3]), months[4]),  # later revisions not yet visible; a window start
        (months[-5], gp.publication(months[-1]), None),  # an old cutoff seen with today's revisions
    ]


@pytest.mark.parametrize("case", range(3))
def test_pandas_equals_sql_macro(warehouse, case):
    con, panel = warehouse
    cutoff, as_of, start = _cases(panel)[case]
    got = pf.build(con, cutoff, as_of, horizon=4, start=start)
    expected = pf.sql_frame(con, cutoff, as_of, horizon=4, start=start)
    result = pf.compare(got, expected)
    assert result["rows"] == len(expected) > 100
    assert result["rows_only_left"] == result["rows_only_right"] == 0
    assert result["cells_differing"] == 0, result["columns_differing"]
    assert list(got.columns) == list(expected.columns)
    assert got[pf.KEYS].astype(str).equals(expected[pf.KEYS].astype(str))  # same order as the macro's ORDER BY


def test_as_of_hides_the_revision(warehouse):
    """An as-of date before a revision's publication must show the first release in lag_1."""
    con, panel = warehouse
    changed = (panel.first != panel.latest).any(axis=0)[:, :-2]
    d, m = (int(i[0]) for i in np.nonzero(panel.revised[:, :-2] & changed))
    cutoff = panel.months[m]
    early = pf.build(con, cutoff, gp.publication(cutoff), horizon=1)
    late = pf.build(con, cutoff, gp.publication(add_months(cutoff, 1)), horizon=1)
    pick = lambda f: f[(f.destination == panel.destinations[d]) & (f.month == f.month.max())]  # noqa: E731
    assert np.array_equal(pick(early)["lag_1"].to_numpy(), panel.first[:, d, m].astype(float))
    assert np.array_equal(pick(late)["lag_1"].to_numpy(), panel.latest[:, d, m].astype(float))


def test_compare_reports_a_single_changed_cell(warehouse):
    con, panel = warehouse
    expected = pf.sql_frame(con, panel.months[-1], gp.publication(panel.months[-1]), horizon=2)
    changed = expected.copy()
    changed.loc[7, "roll_mean_6"] = changed.loc[7, "roll_mean_6"] + 0.5
    result = pf.compare(changed, expected)
    assert result["cells_differing"] == 1 and result["columns_differing"] == ["roll_mean_6"]
    assert result["max_abs_diff"] == pytest.approx(0.5)
