"""Read a dropped file into a table of text columns, or say in plain words why it cannot be read.

Every value is kept as the text that was in the file (CSV) or rendered as text (Parquet), so validation can
quote the offending value exactly and no reader guesses a type behind the user's back. Problems that stop a
file from being read at all (encoding, delimiter, binary content, ragged rows, Parquet types) are raised as
`Unreadable`; problems with values are left to the validation suite.
"""

from __future__ import annotations

import codecs
import csv
import hashlib
from dataclasses import dataclass, field
from pathlib import Path

import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.csv as pacsv
import pyarrow.parquet as pq

from dyadcast.ingest.kinds import PUBLISHED_ON, Kind

CHUNK = 1 << 20
UTF8_BOM = b"\xef\xbb\xbf"
DELIMITERS = {";": "semicolon ';'", "\t": "tab", "|": "pipe '|'"}
MAGIC = {
    b"PK\x03\x04": "a zip archive or an Excel workbook (.xlsx)",
    b"\xd0\xcf\x11\xe0": "an old Excel/Office document (.xls)",
    b"PAR1": "a Parquet file",
    b"%PDF": "a PDF document",
    b"\x1f\x8b": "a gzip archive",
}


class Unreadable(ValueError):
    """The file cannot be read as a table; `reason` is one line, `details` the longer explanation and fix."""

    def __init__(self, reason: str, details: str = "") -> None:
        super().__init__(reason)
        self.reason = reason
        self.details = details


@dataclass
class ByteFacts:
    """What one streaming pass over the bytes tells us: the content hash, size and text hygiene."""

    sha256: str
    size: int
    head: bytes
    bad_utf8: tuple[int, int, bytes] | None = None  # (line, byte offset, offending bytes)
    blank_lines: list[int] = field(default_factory=list)  # 1-based line numbers of empty lines
    has_quotes: bool = True  # without a '"' no CSV value can span lines


@dataclass
class Drop:
    """A readable file: its text columns plus what a reader needs to point at rows."""

    table: pa.Table
    source_format: str  # 'csv' or 'parquet'
    columns: list[str]
    blank_lines: list[int] = field(default_factory=list)

    def line_of(self, index: int) -> int:
        """CSV line of data row `index` (header is line 1; empty lines are skipped by the reader)."""
        if self.source_format != "csv":
            return index + 1
        line = index + 2
        for blank in self.blank_lines:  # sorted; each empty line before the row pushes it down by one
            if blank <= line:
                line += 1
            else:
                break
        return line

    @property
    def row_label(self) -> str:
        return "line" if self.source_format == "csv" else "row"


def scan_bytes(path: Path) -> ByteFacts:
    """Hash, size, first bytes, first invalid UTF-8 sequence and empty lines, in one pass of 1 MB chunks."""
    digest = hashlib.sha256()
    decoder = codecs.getincrementaldecoder("utf-8")()
    size, lines_before, head, prev = 0, 0, b"", b"\n"
    bad: tuple[int, int, bytes] | None = None
    blanks: list[int] = []
    quotes = False
    with open(path, "rb") as handle:
        while chunk := handle.read(CHUNK):
            digest.update(chunk)
            quotes = quotes or b'"' in chunk
            if not head:
                head = chunk[:8192]
            if bad is None:
                try:
                    decoder.decode(chunk)
                except UnicodeDecodeError as exc:
                    # exc.object may start with a partial character kept back from the previous chunk.
                    start = max(0, exc.start - (len(exc.object) - len(chunk)))
                    line = lines_before + chunk.count(b"\n", 0, start) + 1
                    bad = (line, size + start, chunk[start : start + 4])
            if len(blanks) < 100_000:
                blanks.extend(_blank_lines(prev[-1:] + chunk, lines_before))
            lines_before += chunk.count(b"\n")
            size += len(chunk)
            prev = chunk
    if bad is None:
        try:
            decoder.decode(b"", final=True)
        except UnicodeDecodeError:
            bad = (lines_before + 1, size, b"")
    return ByteFacts(digest.hexdigest(), size, head, bad, blanks, quotes)


def _blank_lines(data: bytes, lines_before: int) -> list[int]:
    """Line numbers of empty lines in `data`, whose first byte is the last byte of the previous chunk."""
    out = []
    for pattern in (b"\n\n", b"\n\r\n"):
        start = data.find(pattern)
        while start != -1:
            out.append(lines_before + data.count(b"\n", 1, start + 1) + 1)
            start = data.find(pattern, start + 1)
    return sorted(set(out))


def sniff_binary(head: bytes, name: str, expected: str) -> None:
    """Refuse files that are not text at all before a CSV parser produces a baffling message about them."""
    for magic, what in MAGIC.items():
        if head.startswith(magic):
            raise Unreadable(
                f"not a CSV text file: the content is {what}",
                f"{name} is named like a {expected} file but holds {what}. Export the data as CSV (UTF-8, comma "
                "separated) or save it as Parquet with a .parquet extension, then drop it again.",
            )
    if head.startswith((b"\xff\xfe", b"\xfe\xff")):
        raise Unreadable(
            "not UTF-8: the file is UTF-16 text; re-save it as UTF-8",
            "The file starts with a UTF-16 byte-order mark. Re-save it as 'CSV UTF-8 (comma delimited)'.",
        )
    control = sum(1 for b in head if b < 9 or 13 < b < 32)
    if b"\x00" in head or (head and control / len(head) > 0.01):
        raise Unreadable(
            "not a CSV text file: the content is binary",
            f"{name} contains binary bytes (NUL or control characters) in its first {len(head)} bytes, so it is "
            "not a CSV text file. Check that the right file was exported, as CSV UTF-8.",
        )


def check_text(facts: ByteFacts, name: str) -> None:
    if facts.bad_utf8 is not None:
        line, offset, raw = facts.bad_utf8
        raise Unreadable(
            f"not UTF-8 (line {line}, byte {offset}: {raw.hex(' ')}): re-save the file as UTF-8",
            f"Line {line} of {name} contains bytes that are not valid UTF-8 (at byte offset {offset}: "
            f"{raw.hex(' ')}). The file was probably saved as Latin-1 / Windows-1252. dyadcast does not guess "
            "encodings, because a wrong guess silently changes names. Re-save the file as UTF-8 (in a spreadsheet: "
            "'CSV UTF-8') and drop it again.",
        )


def header_fields(head: bytes) -> list[str]:
    text = head.removeprefix(UTF8_BOM).decode("utf-8", errors="replace")
    first = text.splitlines()[0] if text.strip() else ""
    return next(csv.reader([first]), [])


def check_header(fields: list[str], name: str, kind: Kind) -> None:
    if len(fields) <= 1:
        line = fields[0] if fields else ""
        for delimiter, label in DELIMITERS.items():
            if delimiter in line:
                raise Unreadable(
                    f"wrong delimiter: the header is separated by {label}, not by commas",
                    f"The header line of {name} is {line!r}. dyadcast reads comma-separated files. Re-export "
                    f"with ',' as the separator (in a spreadsheet: 'CSV UTF-8 (comma delimited)'). Expected "
                    f"header: {','.join(kind.columns)}",
                )
    duplicated = sorted({f for f in fields if fields.count(f) > 1})
    if duplicated:
        raise Unreadable(
            f"column(s) {duplicated} appear more than once in the header",
            f"Each column may appear once. Expected header: {','.join(kind.columns)}",
        )


def read_csv(path: Path, facts: ByteFacts, kind: Kind) -> Drop:
    name = path.name
    if facts.size == 0 or not facts.head.removeprefix(UTF8_BOM).strip():
        raise Unreadable(
            "the file is empty (no header, no rows)",
            f"{name} has no content. Export the data again with its header line: {','.join(kind.columns)}",
        )
    sniff_binary(facts.head, name, "CSV")
    check_text(facts, name)
    fields = header_fields(facts.head)
    check_header(fields, name, kind)
    ragged: list[tuple[int | None, str, int, int]] = []

    def on_ragged(row: pacsv.InvalidRow) -> str:
        ragged.append((row.number, row.text, row.expected_columns, row.actual_columns))
        return "skip"

    def parse(threads: bool) -> pa.Table:
        return pacsv.read_csv(
            path,
            read_options=pacsv.ReadOptions(use_threads=threads),
            parse_options=pacsv.ParseOptions(invalid_row_handler=on_ragged),
            convert_options=pacsv.ConvertOptions(
                column_types={f: pa.string() for f in fields},
                strings_can_be_null=False,
                quoted_strings_can_be_null=False,
            ),
        )

    try:
        table = parse(threads=True)
        if ragged:  # re-read single-threaded: only then does the reader know line numbers
            ragged.clear()
            table = parse(threads=False)
    except (pa.ArrowInvalid, pa.ArrowTypeError) as exc:
        raise Unreadable(
            f"not a readable CSV file: {str(exc).splitlines()[0]}",
            "The CSV parser stopped. Common causes: an unclosed quote, or a different delimiter. "
            "Re-export as 'CSV UTF-8 (comma delimited)'.",
        ) from exc
    if ragged:
        raise Unreadable(_ragged_reason(ragged), _ragged_details(ragged, len(fields)))
    return Drop(table, "csv", list(table.column_names), facts.blank_lines)


def _ragged_reason(ragged: list[tuple[int | None, str, int, int]]) -> str:
    number, _text, expected, actual = ragged[0]
    where = f"line {number}" if number else "a row"
    return (
        f"{len(ragged)} row(s) have a different number of fields than the header ({where} has {actual}, "
        f"the header {expected}); a comma inside a value (e.g. a thousands separator) must be removed or quoted"
    )


def _ragged_details(ragged: list[tuple[int | None, str, int, int]], width: int) -> str:
    lines = [f"The header has {width} columns. Rows with another number of fields:"]
    for number, text, _expected, actual in ragged[:10]:
        lines.append(f"  line {number if number else '?'} ({actual} fields): {text}")
    lines.append(
        "Write numbers without thousands separators (1234, not 1,234), quote text that contains a comma, "
        "and check that every row has a value for every column."
    )
    return "\n".join(lines)


# Parquet: which physical types each column may have. Values are then rendered as text for the suite.
def _allowed(kind: Kind, column: str) -> tuple[str, ...]:
    if column in kind.counts or column in kind.flags:
        return ("integer",) if column in kind.counts else ("integer", "boolean")
    if column in {n.column for n in kind.numbers}:
        return ("integer", "floating")
    if column in (kind.date, PUBLISHED_ON):
        return ("string", "date")
    return ("string",)


def _family(data_type: pa.DataType) -> str:
    if pa.types.is_integer(data_type):
        return "integer"
    if pa.types.is_floating(data_type) or pa.types.is_decimal(data_type):
        return "floating"
    if pa.types.is_boolean(data_type):
        return "boolean"
    if pa.types.is_string(data_type) or pa.types.is_large_string(data_type):
        return "string"
    if pa.types.is_date(data_type) or pa.types.is_timestamp(data_type):
        return "date"
    if pa.types.is_dictionary(data_type):
        return _family(data_type.value_type)
    return str(data_type)


def read_parquet(path: Path, facts: ByteFacts, kind: Kind) -> Drop:
    name = path.name
    if facts.size == 0:
        raise Unreadable("the file is empty (0 bytes)", f"{name} has no content. Export the data again.")
    try:
        table = pq.read_table(path)
    except (pa.ArrowException, OSError) as exc:
        raise Unreadable(
            f"not a readable Parquet file: {str(exc).splitlines()[0]}",
            f"{name} has a .parquet extension but could not be read as Parquet. Re-export it, or save it as "
            "CSV UTF-8 with a .csv extension.",
        ) from exc
    wrong = []
    for column in table.column_names:
        if column not in kind.required(True):
            continue
        family = _family(table.schema.field(column).type)
        allowed = _allowed(kind, column)
        if family not in allowed:
            wrong.append(f"column '{column}' has type {table.schema.field(column).type}; expected {' or '.join(allowed)}")
    if wrong:
        raise Unreadable(
            "Parquet column type(s) wrong: " + "; ".join(wrong),
            "Write the columns with these types: codes, months ('YYYY-MM') and names as strings; arrivals as "
            "integers; flags as integers 0/1; other numbers as integers or floats; dates as date or 'YYYY-MM-DD' "
            "strings.",
        )
    return Drop(_as_text(table), "parquet", list(table.column_names))


def _as_text(table: pa.Table) -> pa.Table:
    """Render every column as text the way a CSV would hold it, so one suite checks both formats."""
    out = []
    for column in table.columns:
        data_type = column.type
        if pa.types.is_dictionary(data_type):
            column = column.cast(data_type.value_type)
            data_type = column.type
        if pa.types.is_boolean(data_type):
            column = column.cast(pa.int8())
        elif pa.types.is_timestamp(data_type):
            column = column.cast(pa.date32())
        # a date cast to text is already ISO YYYY-MM-DD, twenty times faster than strftime on millions of rows
        try:
            out.append(column.cast(pa.string()))
        except (pa.ArrowNotImplementedError, pa.ArrowInvalid):  # e.g. a list column outside the contract
            out.append(pa.nulls(len(column), pa.string()))
    return pa.table(out, names=table.column_names)


def check_line_breaks(drop: Drop) -> None:
    """Refuse values holding a line break: usually an unclosed quote, and `$` in a regex matches before a
    final newline, so the value checks could let 'XAA\n' through."""
    for name in drop.columns:
        column = drop.table.column(name)
        broken = pc.or_(pc.match_substring(column, "\n"), pc.match_substring(column, "\r"))
        first = pc.index(broken, True).as_py()
        if first >= 0:
            where = f"{drop.row_label} {drop.line_of(first)}"
            raise Unreadable(
                f"a value in column '{name}' contains a line break ({where}): an unclosed quote?",
                f"The value starting on {where} is {column[first].as_py()!r}. Values may not span lines. Check "
                "the quotes around that value, or remove line breaks inside cells before exporting.",
            )


def read_drop(path: Path, facts: ByteFacts, kind: Kind) -> Drop:
    parquet = path.suffix.lower() == ".parquet"
    drop = (read_parquet if parquet else read_csv)(path, facts, kind)
    if parquet or facts.has_quotes:
        check_line_breaks(drop)
    return drop

