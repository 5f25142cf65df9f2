"""A fresh in-memory warehouse per test (sql/ applied, no rows)."""

from __future__ import annotations

from collections.abc import Iterator

import duckdb
import pytest
from _feature_warehouse import new_warehouse


@pytest.fixture
def con() -> Iterator[duckdb.DuckDBPyConnection]:
    connection = new_warehouse()
    yield connection
    connection.close()
