"""A load killed with SIGKILL leaves no partial rows; the rerun loads the file exactly once and archives it once."""

from __future__ import annotations

import os
import queue
import signal
import subprocess
import sys
import threading
import time
from pathlib import Path

import pytest
from _ingest_helpers import TODAY, scalar, write_big_flows

from dyadcast.ingest import ingest_inbox
from dyadcast.warehouse import open_warehouse
from dyadcast.workspace import Workspace

ROWS = 200_000

# Runs the same load functions ingest_file calls (without validation, to skip the GX import) and pauses at
# the point named by argv[3], so the kill lands exactly there rather than at a time that depends on the box.
LOADER = r"""
import sys, time
from datetime import date
from pathlib import Path
from dyadcast.ingest.kinds import kind_of
from dyadcast.ingest.load import LoadRecord, commit_load, typed_table
from dyadcast.ingest.read import read_drop, scan_bytes
from dyadcast.warehouse import open_warehouse

path, database, pause_at = Path(sys.argv[1]), sys.argv[2], sys.argv[3]
kind = kind_of(path)
facts = scan_bytes(path)
typed = typed_table(read_drop(path, facts, kind), kind, date(2026, 1, 15))
record = LoadRecord(path.name, kind.name, facts.sha256, "csv", facts.size, "file name", None)

def pause(message):
    if pause_at == "mid-load":
        print("PAUSED", message, flush=True)
        time.sleep(600)

with open_warehouse(database) as con:
    commit_load(con, typed, kind, record, progress=pause, chunk_rows=50_000)
    print("PAUSED after commit", flush=True)
    time.sleep(600)
"""


def _lines(stream, out: queue.Queue) -> None:
    for line in stream:
        out.put(line)


def run_until(command: list[str], marker: str, timeout: float = 120.0) -> str:
    """Start `command`, wait for a line containing `marker`, then SIGKILL it; returns that line."""
    process = subprocess.Popen(command, stdout=subprocess.PIPE, stderr=subprocess.STDOUT, text=True)
    lines: queue.Queue = queue.Queue()
    reader = threading.Thread(target=_lines, args=(process.stdout, lines), daemon=True)
    reader.start()
    deadline = time.monotonic() + timeout
    seen = []
    try:
        while time.monotonic() < deadline:
            try:
                line = lines.get(timeout=1.0)
            except queue.Empty:
                if process.poll() is not None and not reader.is_alive() and lines.empty():
                    break  # exited and every line it wrote has been read
                continue
            seen.append(line)
            if marker in line:
                os.kill(process.pid, signal.SIGKILL)
                process.wait(timeout=30)
                assert process.returncode == -signal.SIGKILL
                return line
        raise AssertionError(f"{marker!r} never appeared (exit {process.poll()}); output:\n{''.join(seen)}")
    finally:
        if process.poll() is None:
            process.kill()
            process.wait()


@pytest.fixture
def big_drop(ws: Workspace) -> Path:
    path = ws.inbox / "flows_2026-01-15.csv"
    write_big_flows(path, ROWS)
    return path


def test_kill_in_the_middle_of_a_load(gx_runner, ws: Workspace, big_drop: Path) -> None:
    line = run_until([sys.executable, "-c", LOADER, str(big_drop), str(ws.warehouse_path), "mid-load"], "PAUSED")
    assert "50,000 of 200,000 rows inserted (not yet committed)" in line  # killed inside the transaction
    with open_warehouse(ws.warehouse_path) as con:
        assert scalar(con, "SELECT count(*) FROM raw_flows") == 0
        assert scalar(con, "SELECT count(*) FROM loads") == 0
        assert scalar(con, "SELECT count(*) FROM load_details") == 0
        assert big_drop.exists()
        summary = ingest_inbox(ws, con, today=TODAY)
        assert [o.status for o in summary.files] == ["accepted"]
        assert scalar(con, "SELECT count(*) FROM raw_flows") == ROWS
        assert scalar(con, "SELECT count(DISTINCT (origin, destination, month)) FROM raw_flows") == ROWS
        assert scalar(con, "SELECT sum(arrivals) FROM raw_flows") == sum(i % 97 for i in range(ROWS))
        again = ingest_inbox(ws, con, today=TODAY)
        assert again.files == []
        assert scalar(con, "SELECT count(*) FROM raw_flows") == ROWS
    assert [p.name for p in ws.archive.iterdir()] == [f"{summary.accepted[0].load_id:06d}_flows_2026-01-15.csv"]
    assert list(ws.inbox.iterdir()) == []


def test_kill_after_commit_before_the_move(gx_runner, ws: Workspace, big_drop: Path) -> None:
    run_until([sys.executable, "-c", LOADER, str(big_drop), str(ws.warehouse_path), "after-commit"], "PAUSED")
    with open_warehouse(ws.warehouse_path) as con:
        assert scalar(con, "SELECT count(*) FROM raw_flows") == ROWS  # committed ...
        assert big_drop.exists()  # ... but not moved
        summary = ingest_inbox(ws, con, today=TODAY)
        assert [o.status for o in summary.files] == ["skipped"]
        assert "archived now as archive/000001_flows_2026-01-15.csv" in summary.skipped[0].reason
        assert scalar(con, "SELECT count(*) FROM raw_flows") == ROWS
        assert scalar(con, "SELECT count(*) FROM loads") == 1
    assert [p.name for p in ws.archive.iterdir()] == ["000001_flows_2026-01-15.csv"]
    assert list(ws.inbox.iterdir()) == []


@pytest.mark.slow
def test_kill_the_ingest_command_mid_load(gx_runner, ws: Workspace, tmp_path: Path) -> None:
    """The real `dyadcast ingest` (validation included) killed while it inserts a 600k-row file."""
    rows = 600_000  # two chunks of at most 500,000 rows: the kill lands between them
    path = ws.inbox / "flows_2026-01-15.csv"
    write_big_flows(path, rows)
    command = [str(Path(sys.executable).with_name("dyadcast")), "ingest", "--workspace", str(ws.root)]
    run_until(command, "rows inserted (not yet committed)", timeout=300)
    with open_warehouse(ws.warehouse_path) as con:
        # The kill follows the progress line by milliseconds, but the last chunk may still have committed:
        # either way there are never partial rows.
        before = scalar(con, "SELECT count(*) FROM raw_flows")
        assert before in (0, rows)
        summary = ingest_inbox(ws, con, today=TODAY)
        assert [o.status for o in summary.files] == ["accepted" if before == 0 else "skipped"]
        assert scalar(con, "SELECT count(*) FROM raw_flows") == rows
    assert len(list(ws.archive.iterdir())) == 1 and list(ws.inbox.iterdir()) == []
