"""The proposed features SQL (bench/proposals/) gives exactly what the shipped macro gives.

The reference is the shipped sql/40_01_dyad_features.sql itself: a proposal must change cost, not values.
"""

from __future__ import annotations

from pathlib import Path

import global_panel as gp
import pytest
from _tiny_warehouse import tiny_warehouse

PROPOSAL = Path(__file__).resolve().parents[2] / "bench" / "proposals" / "40_01_dyad_features.sql"


@pytest.fixture(scope="module")
def warehouse(tmp_path_factory):
    con, panel = tiny_warehouse(tmp_path_factory.mktemp("tiny"), gp.tiny(4))
    con.execute(PROPOSAL.read_text(encoding="utf-8"))
    yield con, panel
    con.close()


@pytest.mark.parametrize("cutoff, as_of, start", [(-1, -1, None), (-3, -3, 14), (-2, -1, 3), (-6, -4, 20)])
def test_proposal_equals_shipped_macro(warehouse, cutoff, as_of, start):
    con, panel = warehouse
    months = panel.months
    params = [gp.publication(months[as_of]), months[cutoff], 4, months[start] if start is not None else months[0]]
    shipped = con.sql("SELECT * FROM dyad_features(?, ?, ?, ?)", params=params).to_arrow_table()
    proposed = con.sql("SELECT * FROM dyad_features_fast(?, ?, ?, ?)", params=params).to_arrow_table()
    assert shipped.num_rows > 0
    assert proposed.schema.equals(shipped.schema)
    assert proposed.equals(shipped)
