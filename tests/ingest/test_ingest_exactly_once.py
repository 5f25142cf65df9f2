"""Exactly-once loading, vintages, and never losing a file."""

from __future__ import annotations

from pathlib import Path

import duckdb
from _ingest_helpers import TODAY, flows_csv, put, scalar
from click.testing import CliRunner

from dyadcast.cli import main
from dyadcast.ingest import inbox, ingest_inbox, kind_of
from dyadcast.ingest.load import LoadRecord, commit_load, typed_table
from dyadcast.ingest.read import read_drop, scan_bytes
from dyadcast.workspace import Workspace

MARCH = flows_csv([("XAA", "QMA", "2025-01", 12), ("XAB", "QMA", "2025-01", 0), ("XAA", "QMA", "2025-02", 5)])
APRIL = flows_csv([("XAA", "QMA", "2025-01", 14), ("XAB", "QMA", "2025-01", 1), ("XAA", "QMA", "2025-02", 5)])


def test_redrop_of_a_loaded_file_is_skipped_and_kept(gx_runner, ws: Workspace, con: duckdb.DuckDBPyConnection) -> None:
    put(ws, "flows_2025-03-15.csv", MARCH)
    first = ingest_inbox(ws, con, today=TODAY)
    assert [o.load_id for o in first.accepted] == [1]
    assert (ws.archive / "000001_flows_2025-03-15.csv").read_bytes() == MARCH
    put(ws, "flows_2025-03-15.csv", MARCH)  # the same bytes again, same name
    put(ws, "flows_copy_2025-03-15.csv", MARCH)  # and under another name
    second = ingest_inbox(ws, con, today=TODAY)
    assert second.accepted == [] and second.rejected == [] and second.ok
    assert len(second.skipped) == 2
    for outcome in second.skipped:
        assert outcome.reason.startswith("already loaded (load 1 of flows_2025-03-15.csv on ")
        assert outcome.load_id == 1
        assert outcome.moved_to.parent == ws.archive / "duplicates"
        assert outcome.moved_to.read_bytes() == MARCH
    assert scalar(con, "SELECT count(*) FROM raw_flows") == 3
    assert scalar(con, "SELECT count(*) FROM loads") == 1
    assert list(ws.inbox.iterdir()) == []
    events = con.execute("SELECT status, count(*) FROM ingest_events GROUP BY 1 ORDER BY 1").fetchall()
    assert events == [("accepted", 1), ("skipped", 2)]


def test_revision_keeps_both_vintages(gx_runner, ws: Workspace, con: duckdb.DuckDBPyConnection) -> None:
    put(ws, "flows_2025-03-15.csv", MARCH)
    put(ws, "flows_2025-04-15.csv", APRIL)
    summary = ingest_inbox(ws, con, today=TODAY)
    assert [o.file for o in summary.accepted] == ["flows_2025-03-15.csv", "flows_2025-04-15.csv"]
    assert summary.new_vintages == {"flows": ["2025-03-15", "2025-04-15"]}
    rows = con.execute(
        "SELECT load_id, published_on::VARCHAR, arrivals FROM raw_flows "
        "WHERE origin = 'XAA' AND month = DATE '2025-01-01' ORDER BY load_id"
    ).fetchall()
    assert rows == [(1, "2025-03-15", 12), (2, "2025-04-15", 14)]  # first release and revision, side by side


def test_file_without_a_publication_date_gets_the_load_date(gx_runner, ws: Workspace, con) -> None:
    put(ws, "flows.csv", MARCH)
    summary = ingest_inbox(ws, con, today=TODAY)
    assert summary.accepted[0].vintages == [TODAY.isoformat()]
    assert "published on the load date 2025-06-01" in summary.accepted[0].reason
    assert scalar(con, "SELECT publication_source FROM load_details") == "load date"


def test_publication_after_the_load_date_is_loaded_with_a_warning(gx_runner, ws: Workspace, con) -> None:
    put(ws, "flows_2025-07-01.csv", MARCH)
    summary = ingest_inbox(ws, con, today=TODAY)
    assert summary.ok
    assert "published 2025-07-01, after the load date 2025-06-01" in summary.accepted[0].reason


def test_died_after_commit_before_move_is_archived_on_the_next_run(gx_runner, ws: Workspace, con) -> None:
    path = put(ws, "flows_2025-03-15.csv", MARCH)
    kind = kind_of(path)
    facts = scan_bytes(path)
    typed = typed_table(read_drop(path, facts, kind), kind, TODAY)
    record = LoadRecord(path.name, kind.name, facts.sha256, "csv", facts.size, "file name", None)
    load_id, archived_as = commit_load(con, typed, kind, record)  # ... and the process "dies" here
    summary = ingest_inbox(ws, con, today=TODAY)
    assert [o.status for o in summary.files] == ["skipped"]
    assert summary.skipped[0].reason.endswith(f"archived now as {archived_as}")
    assert (ws.root / archived_as).read_bytes() == MARCH
    assert scalar(con, "SELECT count(*) FROM raw_flows WHERE load_id = ?", [load_id]) == 3
    assert scalar(con, "SELECT count(*) FROM raw_flows") == 3
    assert sorted(p.name for p in ws.archive.iterdir()) == [f"{load_id:06d}_flows_2025-03-15.csv"]


def test_failed_moves_leave_files_in_the_inbox(gx_runner, ws: Workspace, con, monkeypatch) -> None:
    def refuse(source: Path, target: Path) -> None:
        raise PermissionError(13, "Permission denied", str(target))

    monkeypatch.setattr(inbox, "move_no_clobber", refuse)
    put(ws, "flows_2025-03-15.csv", MARCH)
    put(ws, "flows_bad_2025-03-15.csv", b"origin;destination;month;arrivals\nXAA;QMA;2025-01;3\n")
    summary = ingest_inbox(ws, con, today=TODAY)
    accepted, rejected = summary.accepted[0], summary.rejected[0]
    assert accepted.moved_to is None and "it stays in the inbox; the next run archives it" in accepted.reason
    assert rejected.moved_to is None and "it stays in the inbox" in " ".join(rejected.notes)
    assert "Now at:    still in the inbox" in rejected.report_path.read_text()
    assert sorted(p.name for p in ws.inbox.iterdir()) == ["flows_2025-03-15.csv", "flows_bad_2025-03-15.csv"]
    monkeypatch.undo()
    again = ingest_inbox(ws, con, today=TODAY)  # moves work again: the loaded file is archived, not reloaded
    assert [o.status for o in again.files] == ["skipped", "rejected"]
    assert scalar(con, "SELECT count(*) FROM raw_flows") == 3
    assert (ws.archive / "000001_flows_2025-03-15.csv").exists()
    assert list(ws.inbox.iterdir()) == []


def test_quarantine_never_overwrites(gx_runner, ws: Workspace, con) -> None:
    bad_one = b"origin;destination;month;arrivals\nXAA;QMA;2025-01;3\n"
    bad_two = b"origin;destination;month;arrivals\nXAA;QMA;2025-01;4\n"
    put(ws, "flows_x_2025-03-15.csv", bad_one)
    ingest_inbox(ws, con, today=TODAY)
    put(ws, "flows_x_2025-03-15.csv", bad_two)
    summary = ingest_inbox(ws, con, today=TODAY)
    second = summary.rejected[0].moved_to
    assert second.name.endswith("_flows_x_2025-03-15.csv") and second.read_bytes() == bad_two
    assert (ws.quarantine / "flows_x_2025-03-15.csv").read_bytes() == bad_one
    assert (ws.quarantine / f"{second.name}.rejected.txt").exists()
    assert scalar(con, "SELECT count(*) FROM rejected_files") == 2


def test_uploads_in_progress_are_left_alone(ws: Workspace, con) -> None:
    for name in (".flows_2025-03-15.csv", "flows_2025-03-15.csv.part", "flows_2025-03-15.csv.tmp"):
        put(ws, name, MARCH)
    (ws.inbox / "subfolder").mkdir()
    summary = ingest_inbox(ws, con, today=TODAY)
    assert summary.files == [] and summary.ok
    assert len(list(ws.inbox.iterdir())) == 4
    assert "The inbox was empty." in summary.to_markdown()


def test_cli_exit_status_and_lines(gx_runner, ws: Workspace) -> None:
    put(ws, "flows_2025-03-15.csv", MARCH)
    result = CliRunner().invoke(main, ["ingest", "--workspace", str(ws.root)])
    assert result.exit_code == 0, result.output
    assert "accepted  flows_2025-03-15.csv: load 1, flows, 3 rows, published 2025-03-15" in result.output
    assert "ingest: 1 accepted, 0 rejected, 0 skipped; 3 rows loaded" in result.output
    put(ws, "flows_2025-03-15.csv", MARCH)
    put(ws, "flows_neg_2025-03-16.csv", flows_csv([("XAA", "QMA", "2025-01", -1)]))
    result = CliRunner().invoke(main, ["ingest", "-w", str(ws.root)])
    assert result.exit_code == 1
    assert "skipped   flows_2025-03-15.csv: already loaded (load 1 of flows_2025-03-15.csv" in result.output
    assert "rejected  flows_neg_2025-03-16.csv: arrivals is not a whole number >= 0 in 1 of 1 rows" in result.output


def test_cli_without_workspace_says_what_to_do(tmp_path: Path) -> None:
    result = CliRunner().invoke(main, ["ingest", "--workspace", str(tmp_path / "nowhere")])
    assert result.exit_code != 0
    assert "is not a dyadcast workspace" in result.output and "dyadcast init" in result.output
