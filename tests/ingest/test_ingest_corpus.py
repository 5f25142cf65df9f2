"""One drop holding the whole malformed corpus plus good files: every bad file is quarantined for the right
reason with a report, nothing of it is loaded, and every good file in the same drop loads."""

from __future__ import annotations

import re
from pathlib import Path

import duckdb
import pytest
from _ingest_corpus import bad_cases, good_files
from _ingest_helpers import TODAY, put, scalar

from dyadcast.ingest import IngestSummary, ingest_inbox
from dyadcast.warehouse import open_warehouse
from dyadcast.workspace import Workspace, init_workspace

CASES = {case.name: case for case in bad_cases()}
GOOD = good_files()


@pytest.fixture(scope="module")
def ingested(gx_runner, tmp_path_factory) -> tuple[Workspace, IngestSummary, duckdb.DuckDBPyConnection]:
    ws = init_workspace(tmp_path_factory.mktemp("corpus") / "ws")
    for case in CASES.values():
        put(ws, case.name, case.content)
    for name, (content, _kind, _rows) in GOOD.items():
        put(ws, name, content)
    messages: list[str] = []
    with open_warehouse(ws.warehouse_path) as con:
        summary = ingest_inbox(ws, con, progress=messages.append, today=TODAY)
        yield ws, summary, con


def test_corpus_is_large_enough() -> None:
    assert len(CASES) >= 30


def test_counts_and_status(ingested) -> None:
    ws, summary, _con = ingested
    assert sorted(o.file for o in summary.rejected) == sorted(CASES)
    assert sorted(o.file for o in summary.accepted) == sorted(GOOD)
    assert summary.skipped == []
    assert summary.ok is False
    assert list(ws.inbox.iterdir()) == []  # every file went somewhere


@pytest.mark.parametrize("name", sorted(CASES))
def test_bad_file_is_quarantined_for_the_right_reason(ingested, name: str) -> None:
    ws, summary, con = ingested
    case = CASES[name]
    outcome = next(o for o in summary.rejected if o.file == name)
    assert case.reason in outcome.reason, outcome.reason
    assert outcome.moved_to == ws.quarantine / name
    assert (ws.quarantine / name).read_bytes() == case.content  # moved, never modified
    report = outcome.report_path.read_text(encoding="utf-8")
    assert report == (ws.quarantine / f"{name}.rejected.txt").read_text(encoding="utf-8")
    assert f"File:      {name}" in report
    assert "REJECTED. Nothing from this file was loaded." in report
    assert case.reason in report
    for text in case.also:
        assert text in report
    assert "What to do" in report
    rows = con.execute("SELECT reason, report_path FROM rejected_files WHERE file_name = ?", [name]).fetchall()
    assert rows == [(outcome.reason, f"quarantine/{name}.rejected.txt")]


def test_nothing_of_a_rejected_file_is_loaded(ingested) -> None:
    _ws, summary, con = ingested
    assert scalar(con, "SELECT count(*) FROM loads") == len(GOOD)
    loaded = {r[0] for r in con.execute("SELECT file_name FROM loads").fetchall()}
    assert loaded == set(GOOD)
    expected = {}
    for _content, kind, rows in GOOD.values():
        expected[kind] = expected.get(kind, 0) + rows
    assert summary.rows_by_kind == expected
    for kind, rows in expected.items():
        assert scalar(con, f"SELECT count(*) FROM raw_{kind}") == rows


def test_good_files_load_with_the_right_values(ingested) -> None:
    _ws, summary, con = ingested
    by_file = {o.file: o for o in summary.accepted}
    # BOM + CRLF: the first column is 'origin', not '\ufefforigin', and the values are intact.
    bom = by_file["flows_bom_2025-03-16.csv"]
    got = con.execute(
        "SELECT origin, destination, strftime(month, '%Y-%m'), arrivals, published_on::VARCHAR FROM raw_flows "
        "WHERE load_id = ? ORDER BY destination", [bom.load_id]
    ).fetchall()
    assert got == [("XAC", "QMA", "2025-02", 5, "2025-03-16"), ("XAC", "QMB", "2025-02", 0, "2025-03-16")]
    # The history file keeps its two vintages; loads.published_on is the newest of them.
    history = by_file["flows_history.csv"]
    assert history.vintages == ["2025-01-10", "2025-02-10"]
    assert scalar(con, "SELECT published_on::VARCHAR FROM loads WHERE load_id = ?", [history.load_id]) == "2025-02-10"
    assert scalar(con, "SELECT vintages FROM load_details WHERE load_id = ?", [history.load_id]) == 2
    # Optional empty diaspora becomes NULL; the extra column is ignored with a note.
    dyads = by_file["dyad_attributes_2025-03-15.csv"]
    assert any("extra column 'source'" in n for n in dyads.notes)
    assert con.execute("SELECT diaspora FROM raw_dyad_attributes ORDER BY origin").fetchall() == [(None,), (2500.0,)]
    assert scalar(con, "SELECT sum(value) FROM raw_origin_indicators") == pytest.approx(17 - 1.25)
    assert scalar(con, "SELECT max(intensity) FROM raw_signals") == 100.0
    assert summary.new_vintages["flows"] == ["2025-01-10", "2025-02-10", "2025-03-15", "2025-03-16", "2025-03-17"]


def test_report_shows_example_rows_with_line_numbers(ingested) -> None:
    ws, _summary, _con = ingested
    report = (ws.quarantine / "flows_negative_2025-03-15.csv.rejected.txt").read_text()
    # The CSV line of data row i is i + 2: the bad row is the 2nd data row, so line 3.
    assert re.search(r"^3\s+XAB\s+QMA\s+2025-01\s+-4\s+arrivals$", report, re.MULTILINE), report
    assert "Data rows: 3" in report


def test_summary_texts(ingested) -> None:
    _ws, summary, _con = ingested
    text = summary.to_text()
    assert text.startswith(f"ingest: {len(GOOD)} accepted, {len(CASES)} rejected, 0 skipped")
    assert "REJECTED flows_negative_2025-03-15.csv: arrivals is not a whole number" in text
    markdown = summary.to_markdown()
    assert "| flows | 10 | 2025-01-10 … 2025-03-17 |" in markdown
    assert "| `arrivals_2025-03-15.csv` | rejected | unknown kind" in markdown


def test_report_lists_at_most_ten_rows_and_counts_blank_lines(gx_runner, ws: Workspace, tmp_path: Path) -> None:
    rows = [f"XAA,QM{chr(65 + i)},2025-01,-{i + 1}" for i in range(15)]
    content = ("origin,destination,month,arrivals\n" + "\n".join(rows[:5]) + "\n\n" + "\n".join(rows[5:]) + "\n")
    put(ws, "flows_many_bad_2025-03-15.csv", content.encode())
    summary = ingest_inbox(ws, today=TODAY)
    report = summary.rejected[0].report_path.read_text()
    assert "arrivals is not a whole number >= 0 in 15 of 15 rows" in report
    table = [line for line in report.splitlines() if re.match(r"^\d+\s+XAA\s", line)]
    assert len(table) == 10
    # Rows 0-4 are on lines 2-6; line 7 is empty, so row 5 is on line 8 (index + 2 + one blank line).
    assert [int(line.split()[0]) for line in table] == [2, 3, 4, 5, 6, 8, 9, 10, 11, 12]
    assert table[5].split()[4] == "-6"
