"""Run the `dyadcast` CLI with a pause at one named point, so that a test can kill it exactly there.

Test-only: production code has no fault hooks. The pause wraps a function at a boundary that matters
for consistency, writes the process id to a marker file and sleeps; the test then sends SIGKILL.

    python fault_launcher.py POINT MARKER_FILE run --workspace DIR ...

POINT is one of:
  load_uncommitted  ingest: raw rows inserted, transaction not yet committed
  load_committed    ingest: load committed, file not yet moved out of the inbox
  snapshot_tmp      snapshot files written to the temporary folder, not yet renamed into place
  snapshot_unindexed snapshot renamed into place, not yet indexed in the warehouse
  score_published   accuracy batch file renamed into place, warehouse rows not yet committed
"""

from __future__ import annotations

import importlib
import os
import sys
import time
from pathlib import Path
from typing import Any

MODULES = ("dyadcast.snapshots", "dyadcast.cycle", "dyadcast.ingest.inbox", "dyadcast.ingest.load",
           "dyadcast.scoring.store", "dyadcast.scoring.pending", "flows.steps")


def pause(marker: Path) -> None:
    marker.write_text(str(os.getpid()), encoding="utf-8")
    time.sleep(600)


def replace_everywhere(original: Any, replacement: Any) -> int:
    """Swap a function in every loaded module that holds a reference to it (imports by name copy it)."""
    count = 0
    for name in MODULES:
        module = sys.modules[name]
        for attr, value in list(vars(module).items()):
            if value is original:
                setattr(module, attr, replacement)
                count += 1
    return count


def install(point: str, marker: Path) -> None:
    for name in MODULES:
        importlib.import_module(name)
    snapshots, inbox, store, steps = (sys.modules[n] for n in
                                      ("dyadcast.snapshots", "dyadcast.ingest.inbox", "dyadcast.scoring.store",
                                       "flows.steps"))
    if point == "load_uncommitted":
        original = inbox.commit_load

        def hooked(con: Any, typed: Any, kind: Any, record: Any, progress: Any = None, **_: Any) -> Any:
            if kind.name != "flows":
                return original(con, typed, kind, record, progress)
            # small chunks make commit_load report progress between inserts, inside the open transaction
            return original(con, typed, kind, record, lambda _msg: pause(marker),
                            chunk_rows=max(1, typed.num_rows // 3))
    elif point == "load_committed":
        original = inbox._move

        def hooked(source: Path, target: Path) -> Any:
            if target.parent.name == "archive" and source.name.startswith("flows"):
                pause(marker)
            return original(source, target)
    elif point == "snapshot_tmp":
        original = snapshots._fsync_dir

        def hooked(directory: Path) -> None:
            original(directory)
            pause(marker)
    elif point == "snapshot_unindexed":
        original = steps.index_snapshot

        def hooked(*args: Any, **kwargs: Any) -> Any:
            pause(marker)
            return original(*args, **kwargs)
    elif point == "score_published":
        original = store.publish

        def hooked(tmp: Path, final: Path) -> None:
            original(tmp, final)
            pause(marker)
    else:
        raise SystemExit(f"unknown fault point {point!r}")
    if not replace_everywhere(original, hooked):
        raise SystemExit(f"fault point {point!r}: the function to wrap is no longer used; update the launcher")


if __name__ == "__main__":
    install(sys.argv[1], Path(sys.argv[2]))
    from dyadcast.cli import main

    sys.exit(main(sys.argv[3:], prog_name="dyadcast"))
