"""The rejection report a data engineer reads next to a quarantined file: what failed, where, what to do."""

from __future__ import annotations

import json
from dataclasses import dataclass, field
from datetime import datetime
from pathlib import Path
from typing import Any

from dyadcast.ingest.kinds import Kind, known_kinds_text
from dyadcast.ingest.read import Drop
from dyadcast.ingest.validate import Finding, is_helper

MAX_EXAMPLE_ROWS = 10


@dataclass
class Rejection:
    """Everything a report needs; `drop` is None when the file could not be read as a table at all."""

    file_name: str
    kind: Kind | None
    reason: str
    sha256: str | None
    size: int | None
    at: datetime
    details: str = ""
    findings: list[Finding] = field(default_factory=list)
    drop: Drop | None = None
    notes: list[str] = field(default_factory=list)
    gx_result: dict[str, Any] | None = None


def one_line(findings: list[Finding]) -> str:
    """The first problem, plus how many more: short enough for a console line and the rejected_files table."""
    if not findings:
        return "rejected"
    more = len(findings) - 1
    return findings[0].message + (f" (and {more} more problem{'s' if more > 1 else ''})" if more else "")


def render(rejection: Rejection, quarantined_as: str | None) -> str:
    kind = rejection.kind
    rows = rejection.drop.table.num_rows if rejection.drop is not None else None
    head = [
        "dyadcast rejection report",
        "=========================",
        f"File:      {rejection.file_name}",
        f"Now at:    {quarantined_as or 'still in the inbox (it could not be moved to quarantine)'}",
        f"Kind:      {kind.name + ' (columns ' + ','.join(kind.columns) + ')' if kind else 'unknown'}",
        f"Received:  {rejection.at:%Y-%m-%d %H:%M:%S} UTC"
        + (f", {rejection.size:,} bytes, sha256 {rejection.sha256}" if rejection.sha256 else ""),
        f"Data rows: {rows:,}" if rows is not None else "Data rows: (the file could not be read as a table)",
        "Verdict:   REJECTED. Nothing from this file was loaded.",
        "",
        f"Reason: {rejection.reason}",
        "",
    ]
    body: list[str] = []
    if rejection.findings:
        title = f"Failed checks ({len(rejection.findings)})"
        body += [title, "-" * len(title)]
        for number, finding in enumerate(rejection.findings, 1):
            body.append(f"{number}. {finding.message}")
            if finding.fix:
                body.append(f"   What to do: {finding.fix}")
        body.append("")
        body += _example_rows(rejection.findings, rejection.drop)
    if rejection.details:
        body += ["Details", "-------", rejection.details, ""]
    if rejection.notes:
        body += ["Notes", "-----", *[f"- {n}" for n in rejection.notes], ""]
    body += [
        "What to do",
        "----------",
        "Correct the file (or export it again) and drop it into the inbox. A corrected file has a different",
        "content hash, so it is loaded normally; this copy stays in quarantine for reference and can be deleted.",
        f"Known kinds: {known_kinds_text()}.",
        "The publication date comes from a published_on column, else a _YYYY-MM-DD suffix before the",
        "extension, else the day of loading.",
    ]
    return "\n".join(head + body) + "\n"


def _example_rows(findings: list[Finding], drop: Drop | None) -> list[str]:
    if drop is None:
        return []
    problems: dict[int, list[str]] = {}
    for finding in findings:
        for index in finding.rows:
            problems.setdefault(index, []).append(_problem_label(finding))
    if not problems:
        return []
    indexes = sorted(problems)[:MAX_EXAMPLE_ROWS]
    columns = [c for c in drop.columns if not is_helper(c)]
    label = drop.row_label
    table = [[label, *columns, "problem"]]
    for index in indexes:
        values = [_cell(drop.table.column(c)[index].as_py()) for c in columns]
        table.append([str(drop.line_of(index)), *values, ", ".join(dict.fromkeys(problems[index]))])
    widths = [max(len(row[i]) for row in table) for i in range(len(table[0]))]
    title = f"Example rows (up to {MAX_EXAMPLE_ROWS}" + ("; line 1 is the header)" if label == "line" else ")")
    lines = [title, "-" * len(title)]
    lines += ["  ".join(cell.ljust(width) for cell, width in zip(row, widths, strict=True)).rstrip() for row in table]
    return [*lines, ""]


def _problem_label(finding: Finding) -> str:
    if finding.check == "unique":
        return "duplicate key"
    if finding.check == "after_publication":
        return f"{finding.column} after publication"
    return finding.column or finding.check


def _cell(value: Any) -> str:
    if value is None:
        return "(null)"
    text = str(value)
    return repr(text) if text == "" or text != text.strip() else text


def write_report(rejection: Rejection, folder: Path, quarantined_name: str, quarantined_as: str | None) -> Path:
    """Write `<file>.rejected.txt` (and the GX result as `<file>.rejected.json` when checks ran)."""
    folder.mkdir(parents=True, exist_ok=True)
    path = folder / f"{quarantined_name}.rejected.txt"
    path.write_text(render(rejection, quarantined_as), encoding="utf-8")
    if rejection.gx_result is not None:
        audit = folder / f"{quarantined_name}.rejected.json"
        audit.write_text(json.dumps(rejection.gx_result, indent=1, default=str), encoding="utf-8")
    return path
