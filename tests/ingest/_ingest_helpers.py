"""Small helpers shared by the ingest tests."""

from __future__ import annotations

from datetime import date
from pathlib import Path

import duckdb

from dyadcast.workspace import Workspace

# The load date used when a file names no publication date; fixed so that tests do not depend on the clock.
TODAY = date(2025, 6, 1)


def put(ws: Workspace, name: str, content: bytes) -> Path:
    path = ws.inbox / name
    path.write_bytes(content)
    return path


def scalar(con: duckdb.DuckDBPyConnection, sql: str, params: list | None = None):
    return con.execute(sql, params or []).fetchone()[0]


def flows_csv(rows: list[tuple[str, str, str, int]]) -> bytes:
    lines = ["origin,destination,month,arrivals", *[f"{o},{d},{m},{a}" for o, d, m, a in rows]]
    return ("\n".join(lines) + "\n").encode()


def write_big_flows(path: Path, rows: int, published: str = "2026-01-15") -> None:
    """A valid flows CSV of `rows` rows: 40 origins (XAA...) x 100 destinations (QMA...) x as many months as needed."""
    import itertools

    import pyarrow as pa
    import pyarrow.csv as pacsv

    letters = [a + b for a, b in itertools.product("ABCDEFGHIJKLMNOPQRSTUVWXYZ", repeat=2)]
    origins = ["X" + p for p in letters[:40]]
    destinations = ["Q" + p for p in letters if p >= "MA"][:100]
    months_needed = -(-rows // (len(origins) * len(destinations)))
    months = [f"{2000 + m // 12}-{m % 12 + 1:02d}" for m in range(months_needed)]
    assert months[-1] <= published[:7]
    keys = itertools.islice(itertools.product(origins, destinations, months), rows)
    o, d, m = zip(*keys, strict=True)
    table = pa.table({"origin": o, "destination": d, "month": m, "arrivals": [i % 97 for i in range(rows)]})
    pacsv.write_csv(table, path, pacsv.WriteOptions(quoting_style="none"))
