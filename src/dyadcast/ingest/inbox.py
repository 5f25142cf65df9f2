"""Process the inbox: every file is loaded exactly once, or quarantined with a report, and never lost.

Decisions (documented in the README section of ingest):
- A file whose content hash is already in `loads` is skipped. If its recorded archive copy is missing (the
  earlier run stopped between COMMIT and the move) it is moved there now; otherwise it is a re-drop and
  moves to `archive/duplicates/`, so the inbox only ever holds work still to do.
- A file is never overwritten: archive names start with the load id, quarantine names get a time stamp
  when taken. When a move fails the file stays in the inbox and the outcome says so.
- Names starting with '.' or ending in .part/.tmp/.partial/~ are uploads in progress and are left alone.
"""

from __future__ import annotations

import time
from collections.abc import Callable
from datetime import date
from pathlib import Path

import duckdb
import pyarrow.compute as pc

from dyadcast.ingest import validate
from dyadcast.ingest.kinds import PUBLISHED_ON, UnknownKind, date_in_name, kind_of
from dyadcast.ingest.load import (
    EarlierLoad,
    LoadRecord,
    commit_load,
    find_load,
    free_name,
    move_no_clobber,
    record_event,
    record_rejection,
    typed_table,
    utc_now,
)
from dyadcast.ingest.read import ByteFacts, Unreadable, read_drop, scan_bytes
from dyadcast.ingest.report import Rejection, one_line, write_report
from dyadcast.ingest.summary import ACCEPTED, REJECTED, SKIPPED, FileOutcome, IngestSummary
from dyadcast.warehouse import open_warehouse
from dyadcast.workspace import Workspace

Progress = Callable[[str], None]
IN_PROGRESS_SUFFIXES = (".part", ".tmp", ".partial", ".crdownload", "~")


def _quiet(_: str) -> None:
    return None


def inbox_files(ws: Workspace) -> list[Path]:
    """Files to process, in name order (so dated names load oldest first)."""
    return sorted(
        p
        for p in ws.inbox.iterdir()
        if p.is_file() and not p.name.startswith(".") and not p.name.lower().endswith(IN_PROGRESS_SUFFIXES)
    )


def _relative(ws: Workspace, path: Path | None) -> str | None:
    return path.relative_to(ws.root).as_posix() if path is not None else None


def _move(source: Path, target: Path) -> tuple[Path | None, str]:
    try:
        move_no_clobber(source, target)
    except OSError as exc:
        return None, f"could not move it to {target.parent.name}/ ({exc}); it stays in the inbox"
    return target, ""


def ingest_file(
    path: Path,
    ws: Workspace,
    con: duckdb.DuckDBPyConnection,
    *,
    today: date | None = None,
    progress: Progress | None = None,
) -> FileOutcome:
    """Skip, reject or load one inbox file; `today` is the load date used when a file names no publication."""
    say = progress or _quiet
    started = time.perf_counter()
    facts = scan_bytes(path)
    earlier = find_load(con, facts.sha256)
    if earlier is not None:
        outcome = _skip(path, ws, con, facts, earlier)
    else:
        outcome = _check_and_load(path, ws, con, facts, today or utc_now().date(), say)
    outcome.seconds = time.perf_counter() - started
    record_event(
        con, outcome.file, outcome.status, outcome.kind, facts.sha256, outcome.load_id, outcome.rows,
        outcome.reason, _relative(ws, outcome.moved_to),
    )
    return outcome


def _check_and_load(
    path: Path, ws: Workspace, con: duckdb.DuckDBPyConnection, facts: ByteFacts, today: date, say: Progress
) -> FileOutcome:
    kind = None
    try:
        kind = kind_of(path)
        name_date = date_in_name(path)
        drop = read_drop(path, facts, kind)
    except UnknownKind as exc:
        return _reject(path, ws, con, Rejection(path.name, kind, str(exc), facts.sha256, facts.size, utc_now()))
    except Unreadable as exc:
        rejection = Rejection(path.name, kind, exc.reason, facts.sha256, facts.size, utc_now(), details=exc.details)
        return _reject(path, ws, con, rejection)
    published_default = name_date or today
    if not validate.runner_ready():
        say("  starting Great Expectations (once per process, about 10 s)")
    checked = validate.validate_drop(drop, kind, published_default)
    if not checked.ok:
        rejection = Rejection(
            path.name, kind, one_line(checked.findings), facts.sha256, facts.size, utc_now(),
            findings=checked.findings, drop=drop, notes=checked.notes, gx_result=checked.result_json,
        )
        return _reject(path, ws, con, rejection)
    typed = typed_table(drop, kind, published_default)
    notes = list(checked.notes)
    source = "column" if PUBLISHED_ON in drop.columns else "file name" if name_date else "load date"
    if source == "load date":
        notes.append(f"no published_on column or _YYYY-MM-DD suffix: published on the load date {today}")
    vintages = sorted(d.isoformat() for d in pc.unique(typed.column(PUBLISHED_ON)).to_pylist())
    if vintages[-1] > today.isoformat():
        notes.append(f"published {vintages[-1]}, after the load date {today}: runs as of earlier dates do not see it")
    record = LoadRecord(
        path.name, kind.name, facts.sha256, drop.source_format, facts.size, source, "; ".join(notes) or None
    )
    try:
        load_id, archived_as = commit_load(con, typed, kind, record, say)
    except duckdb.ConstraintException:
        earlier = find_load(con, facts.sha256)  # another process loaded the same content meanwhile
        if earlier is None:
            raise
        return _skip(path, ws, con, facts, earlier)
    moved, problem = _move(path, ws.root / archived_as)
    if problem:
        notes.append(problem + "; the next run archives it")
    return FileOutcome(
        path.name, ACCEPTED, kind.name, "; ".join(notes), load_id=load_id, rows=typed.num_rows,
        vintages=vintages, moved_to=moved, notes=notes,
    )


def _skip(path: Path, ws: Workspace, con: duckdb.DuckDBPyConnection, facts: ByteFacts, earlier: EarlierLoad) -> FileOutcome:
    recorded = ws.root / earlier.archived_as if earlier.archived_as else None
    if recorded is None or not recorded.exists():
        # Loaded, but the run stopped before the move (or an old load without an archive name).
        target = recorded or ws.archive / f"{earlier.load_id:06d}_{earlier.file_name}"
        moved, problem = _move(path, target)
        if moved is not None and recorded is None:
            con.execute("UPDATE loads SET archived_as = ? WHERE load_id = ?", [_relative(ws, moved), earlier.load_id])
        reason = f"already loaded ({earlier.describe()}); " + (problem or f"archived now as {_relative(ws, moved)}")
    else:
        stamp = utc_now().strftime("%Y%m%dT%H%M%S")
        moved, problem = _move(path, free_name(ws.archive / "duplicates", f"{stamp}_{path.name}"))
        reason = f"already loaded ({earlier.describe()}); " + (problem or f"this copy moved to {_relative(ws, moved)}")
    return FileOutcome(path.name, SKIPPED, earlier.kind, reason, load_id=earlier.load_id, moved_to=moved)


def _reject(path: Path, ws: Workspace, con: duckdb.DuckDBPyConnection, rejection: Rejection) -> FileOutcome:
    """Quarantine first, then write the report saying where the file is, then record it."""
    target = free_name(ws.quarantine, path.name)
    moved, problem = _move(path, target)
    if problem:
        rejection.notes.append(problem)
    report_name = (moved or target).name
    try:
        report: Path | None = write_report(rejection, ws.quarantine, report_name, _relative(ws, moved))
    except OSError as exc:
        report = None
        rejection.notes.append(f"the rejection report could not be written: {exc}")
    kind = rejection.kind.name if rejection.kind else None
    record_rejection(con, path.name, kind, rejection.sha256, rejection.reason, _relative(ws, report))
    return FileOutcome(
        path.name, REJECTED, kind, rejection.reason, report_path=report, moved_to=moved, notes=rejection.notes,
    )


def ingest_inbox(
    ws: Workspace,
    con: duckdb.DuckDBPyConnection | None = None,
    progress: Progress | None = None,
    *,
    today: date | None = None,
) -> IngestSummary:
    """Process every file in the inbox in name order; opens the warehouse when no connection is given."""
    if con is None:
        with open_warehouse(ws.warehouse_path) as own:
            return ingest_inbox(ws, own, progress, today=today)
    say = progress or _quiet
    started = time.perf_counter()
    summary = IngestSummary()
    files = inbox_files(ws)
    say(f"ingest: {len(files)} file(s) in {ws.inbox}")
    for path in files:
        try:
            outcome = ingest_file(path, ws, con, today=today, progress=say)
        except FileNotFoundError:
            if path.exists():
                raise
            say(f"  {path.name} left the inbox before it was read; nothing done")
            continue
        summary.add(outcome)
        say("  " + outcome.line())
    summary.seconds = time.perf_counter() - started
    return summary
