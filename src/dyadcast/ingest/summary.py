"""What one file and one ingest run came to, as data for the flow and as text for a person."""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

ACCEPTED, REJECTED, SKIPPED = "accepted", "rejected", "skipped"


@dataclass
class FileOutcome:
    file: str
    status: str  # accepted | rejected | skipped
    kind: str | None = None
    reason: str = ""  # one line: why rejected or skipped; notes for an accepted file
    report_path: Path | None = None  # rejection report
    load_id: int | None = None  # the new load, or the earlier load a skipped file repeats
    rows: int = 0
    vintages: list[str] = field(default_factory=list)  # distinct published_on (YYYY-MM-DD) of the rows loaded
    moved_to: Path | None = None  # None: the file is still in the inbox
    notes: list[str] = field(default_factory=list)
    seconds: float = 0.0

    def line(self) -> str:
        """One line per file for the console and the run log."""
        if self.status == ACCEPTED:
            published = ", ".join(self.vintages) if len(self.vintages) <= 3 else (
                f"{len(self.vintages)} vintages {self.vintages[0]} … {self.vintages[-1]}"
            )
            text = f"accepted  {self.file}: load {self.load_id}, {self.kind}, {self.rows:,} rows, published {published}"
            return text + (f" ({'; '.join(self.notes)})" if self.notes else "")
        if self.status == SKIPPED:
            return f"skipped   {self.file}: {self.reason}"
        where = f"; report: {self.report_path}" if self.report_path else ""
        return f"rejected  {self.file}: {self.reason}{where}"


@dataclass
class IngestSummary:
    accepted: list[FileOutcome] = field(default_factory=list)
    rejected: list[FileOutcome] = field(default_factory=list)
    skipped: list[FileOutcome] = field(default_factory=list)
    rows_by_kind: dict[str, int] = field(default_factory=dict)
    new_vintages: dict[str, list[str]] = field(default_factory=dict)  # kind -> distinct published_on loaded now
    seconds: float = 0.0

    @property
    def ok(self) -> bool:
        """False when any file was rejected: the run should tell someone, even if the rest went in."""
        return not self.rejected

    @property
    def files(self) -> list[FileOutcome]:
        return sorted([*self.accepted, *self.rejected, *self.skipped], key=lambda o: o.file)

    def add(self, outcome: FileOutcome) -> None:
        {ACCEPTED: self.accepted, REJECTED: self.rejected, SKIPPED: self.skipped}[outcome.status].append(outcome)
        if outcome.status == ACCEPTED and outcome.kind:
            self.rows_by_kind[outcome.kind] = self.rows_by_kind.get(outcome.kind, 0) + outcome.rows
            merged = set(self.new_vintages.get(outcome.kind, [])) | set(outcome.vintages)
            self.new_vintages[outcome.kind] = sorted(merged)

    def headline(self) -> str:
        rows = sum(self.rows_by_kind.values())
        return (
            f"ingest: {len(self.accepted)} accepted, {len(self.rejected)} rejected, {len(self.skipped)} skipped; "
            f"{rows:,} rows loaded in {self.seconds:.1f} s"
        )

    def to_text(self) -> str:
        lines = [self.headline()]
        for kind, rows in sorted(self.rows_by_kind.items()):
            vintages = self.new_vintages.get(kind, [])
            lines.append(f"  {kind}: {rows:,} rows, {len(vintages)} vintage(s) {_span(vintages)}")
        for outcome in self.rejected:
            lines.append(f"  REJECTED {outcome.file}: {outcome.reason}")
            if outcome.report_path:
                lines.append(f"           report: {outcome.report_path}")
        return "\n".join(lines)

    def to_markdown(self) -> str:
        lines = [f"### Ingest: {'all files accepted' if self.ok else 'some files were REJECTED'}", "", self.headline(), ""]
        if self.rows_by_kind:
            lines += ["| kind | rows | new vintages (published_on) |", "|---|---:|---|"]
            for kind, rows in sorted(self.rows_by_kind.items()):
                lines.append(f"| {kind} | {rows:,} | {_span(self.new_vintages.get(kind, []))} |")
            lines.append("")
        if self.files:
            lines += ["| file | status | detail |", "|---|---|---|"]
            for outcome in self.files:
                detail = outcome.reason if outcome.status != ACCEPTED else f"load {outcome.load_id}, {outcome.rows:,} rows"
                if outcome.report_path:
                    detail += f" (report: `{outcome.report_path}`)"
                lines.append(f"| `{outcome.file}` | {outcome.status} | {detail.replace('|', '/')} |")
        else:
            lines.append("The inbox was empty.")
        return "\n".join(lines)


def _span(vintages: list[str]) -> str:
    if not vintages:
        return ""
    return vintages[0] if len(vintages) == 1 else f"{vintages[0]} … {vintages[-1]}"
