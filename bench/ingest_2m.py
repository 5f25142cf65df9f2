"""Time and memory of validating and loading a 2-million-row flows CSV (invented data).

Run: OPENBLAS_NUM_THREADS=1 .venv/bin/python bench/ingest_2m.py [--rows 2000000] [--keep DIR]

Prints the time of each stage (the same functions `ingest_file` calls, in the same order), the end-to-end
`ingest_inbox` time on a copy of the file in a fresh workspace, and the peak resident memory of the process.
"""

from __future__ import annotations

import argparse
import itertools
import resource
import shutil
import string
import subprocess
import sys
import tempfile
import time
from datetime import date
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.csv as pacsv

from dyadcast.ingest import ingest_inbox, kind_of
from dyadcast.ingest.load import LoadRecord, commit_load, typed_table
from dyadcast.ingest.read import read_drop, scan_bytes
from dyadcast.ingest.validate import get_runner, validate_drop
from dyadcast.warehouse import open_warehouse
from dyadcast.workspace import init_workspace


def codes(first: str, count: int) -> list[str]:
    """Codes from a user-assigned alpha-3 range, e.g. first='X' gives XAA, XAB, ..."""
    pairs = ("".join(p) for p in itertools.product(string.ascii_uppercase, repeat=2))
    return [first + p for p in itertools.islice(pairs, count)]


def write_flows(path: Path, rows: int, seed: int = 3) -> None:
    """Origins × destinations × months with mostly-zero, heavy-tailed arrivals, published 2026-01-15."""
    origins = codes("X", 50)  # XAA ... (user-assigned block XAA-XZZ)
    destinations = [c for c in codes("Q", 26 * 26) if c >= "QMA"][:200]  # QMA ... (user-assigned QMA-QZZ)
    months_needed = -(-rows // (len(origins) * len(destinations)))
    months = [f"{2000 + (m // 12)}-{m % 12 + 1:02d}" for m in range(months_needed)]
    rng = np.random.default_rng(seed)
    o = np.repeat(np.array(origins), len(destinations) * len(months))[:rows]
    d = np.tile(np.repeat(np.array(destinations), len(months)), len(origins))[:rows]
    m = np.tile(np.array(months), len(origins) * len(destinations))[:rows]
    arrivals = np.where(rng.random(rows) < 0.85, 0, rng.negative_binomial(1, 0.01, rows))
    table = pa.table({"origin": o, "destination": d, "month": m, "arrivals": arrivals})
    pacsv.write_csv(table, path, pacsv.WriteOptions(quoting_style="none"))


def peak_rss_mb() -> float:
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024  # Linux reports KiB


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rows", type=int, default=2_000_000)
    parser.add_argument("--keep", type=Path, default=None, help="keep the workspace in this folder")
    parser.add_argument("--write", type=Path, default=None, help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.write:  # child process: generating the data must not count in the peak memory of the ingest
        write_flows(args.write, args.rows)
        return 0
    root = args.keep or Path(tempfile.mkdtemp(prefix="dyadcast-bench-"))
    ws = init_workspace(root / "ws")
    source = root / "flows_2026-01-15.csv"
    started = time.perf_counter()
    subprocess.run([sys.executable, __file__, "--rows", str(args.rows), "--write", str(source)], check=True)
    print(f"wrote {args.rows:,} rows, {source.stat().st_size / 1e6:.1f} MB in {time.perf_counter() - started:.1f} s")
    print(f"peak RSS before ingest: {peak_rss_mb():.0f} MB")

    timings: dict[str, float] = {}

    def timed(label: str, func, *a, **k):  # noqa: ANN001, ANN202 - a tiny local helper
        t0, c0 = time.perf_counter(), time.process_time()
        out = func(*a, **k)
        timings[label] = time.perf_counter() - t0
        print(f"  {label:<28} {timings[label]:6.2f} s wall  {time.process_time() - c0:6.2f} s CPU  "
              f"peak RSS {peak_rss_mb():6.0f} MB")
        return out

    print("stages (the functions ingest_file calls):")
    runner = timed("import GX + context", get_runner)
    kind = kind_of(source)
    facts = timed("sha256 + UTF-8 scan", scan_bytes, source)
    drop = timed("read CSV (pyarrow, text)", read_drop, source, facts, kind)
    checked = timed("GX suite (flows)", validate_drop, drop, kind, date(2026, 1, 15), runner)
    assert checked.ok, [f.message for f in checked.findings]
    typed = timed("cast to typed Arrow", typed_table, drop, kind, date(2026, 1, 15))
    with open_warehouse(root / "stages.duckdb") as con:
        record = LoadRecord(source.name, kind.name, facts.sha256, "csv", facts.size, "file name", None)
        timed("DuckDB insert + commit", commit_load, con, typed, kind, record)
    stage_total = sum(v for k, v in timings.items() if not k.startswith("import"))
    print(f"  {'sum of stages (excl. import)':<28} {stage_total:6.2f} s")
    del drop, typed, checked

    shutil.copy(source, ws.inbox / source.name)
    t0, c0 = time.perf_counter(), time.process_time()
    summary = ingest_inbox(ws)
    wall, cpu = time.perf_counter() - t0, time.process_time() - c0
    print(f"end to end: ingest_inbox {wall:.2f} s wall, {cpu:.2f} s CPU (GX already imported); "
          f"{summary.rows_by_kind.get('flows', 0):,} rows; ok={summary.ok}")
    print(f"peak RSS of the process: {peak_rss_mb():.0f} MB")
    if args.keep is None:
        shutil.rmtree(root)
    return 0 if summary.ok else 1


if __name__ == "__main__":
    sys.exit(main())
