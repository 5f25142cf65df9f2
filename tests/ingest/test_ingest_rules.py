"""The pieces of the contract on their own: kinds from names, publication dates, line numbers, and the text
rules of the suite checked against independent references (Python's own date and number parsers)."""

from __future__ import annotations

import hashlib
import math
from datetime import date, datetime
from pathlib import Path

import pandas as pd
import pyarrow as pa
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from dyadcast.ingest.kinds import KINDS, UnknownKind, date_in_name, kind_of
from dyadcast.ingest.read import Drop, scan_bytes
from dyadcast.ingest.suites import COUNT, DATE, FLOAT_MAX, MONTH, NUMBER
from dyadcast.ingest.validate import value_hint


@pytest.mark.parametrize(
    ("name", "kind"),
    [
        ("flows.csv", "flows"),
        ("flows_2025-03-15.csv", "flows"),
        ("flows-march.parquet", "flows"),
        ("origin_indicators_2025-03-15.csv", "origin_indicators"),
        ("destination_indicators_history_through_2024-12.csv", "destination_indicators"),
        ("dyad_attributes.PARQUET", "dyad_attributes"),
        ("signals_2025-03-15.csv", "signals"),
    ],
)
def test_kind_from_the_name(name: str, kind: str) -> None:
    assert kind_of(Path(name)).name == kind


@pytest.mark.parametrize(
    ("name", "message"),
    [
        ("flowsy_2025-03-15.csv", "unknown kind"),
        ("inflows.csv", "unknown kind"),
        ("Flows.csv", "unknown kind"),
        ("flows.xlsx", "unknown extension '.xlsx'"),
        ("flows", "unknown extension '(none)'"),
    ],
)
def test_unknown_names_list_the_known_kinds(name: str, message: str) -> None:
    with pytest.raises(UnknownKind) as error:
        kind_of(Path(name))
    assert message in str(error.value)
    assert all(kind in str(error.value) for kind in KINDS)


def test_publication_date_in_the_name() -> None:
    assert date_in_name(Path("flows_2025-03-15.csv")) == date(2025, 3, 15)
    assert date_in_name(Path("flows_history_through_2024-12.csv")) is None
    assert date_in_name(Path("flows_2025-03-15_fixed.csv")) is None  # only right before the extension
    with pytest.raises(UnknownKind, match="'2025-02-30' in the file name is not a real date"):
        date_in_name(Path("flows_2025-02-30.csv"))


def test_line_numbers_skip_blank_lines(tmp_path: Path) -> None:
    path = tmp_path / "flows.csv"
    path.write_bytes(b"h\na\n\nb\r\n\r\nc\n\n")
    facts = scan_bytes(path)
    assert facts.blank_lines == [3, 5, 7]
    drop = Drop(pa.table({"h": ["a", "b", "c"]}), "csv", ["h"], facts.blank_lines)
    assert [drop.line_of(i) for i in range(3)] == [2, 4, 6]  # data row i is on line i + 2 plus the blanks above
    assert Drop(pa.table({"h": ["a"]}), "parquet", ["h"]).line_of(0) == 1


def test_scan_finds_the_first_invalid_utf8_byte_across_chunks(tmp_path: Path) -> None:
    path = tmp_path / "flows.csv"
    body = b"origin\n" + b"XAA\n" * 300_000 + b"caf\xe9\n"  # beyond the first 1 MB chunk
    path.write_bytes(body)
    facts = scan_bytes(path)
    assert facts.bad_utf8 is not None
    line, offset, raw = facts.bad_utf8
    assert (line, offset, raw[:1]) == (300_002, len(body) - 2, b"\xe9")
    assert facts.sha256 == hashlib.sha256(body).hexdigest()


def test_value_hints() -> None:
    assert value_hint("-3") == " (negative)"
    assert value_hint("1,234") == " (thousands separator or decimal comma)"
    assert value_hint("NaN") == value_hint("n/a") == " (text, not a number)"
    assert value_hint("2.5") == " (not a whole number)"
    assert value_hint("") == " (empty)"


# --- The text rules against independent references -------------------------------------------------------
# Each rule is applied the way GX applies it to our frames: `column.astype(str).str.contains(regex)` on the
# pyarrow-backed text column produced by the reader.


def engine_match(pattern: str, text: str) -> bool:
    column = pa.table({"c": pa.array([text], pa.string())}).to_pandas()["c"]
    return bool(column.astype(str).str.contains(pattern)[0])


DATE_LIKE = st.text(alphabet="0123456789-/. ", min_size=0, max_size=12)


@settings(max_examples=150, deadline=None)
@given(st.one_of(DATE_LIKE, st.dates().map(date.isoformat)))
def test_date_rule_matches_python_calendar(text: str) -> None:
    """Reference: Python's datetime.strptime with '%Y-%m-%d' (proleptic Gregorian calendar), restricted to the
    canonical zero-padded form that ISO 8601 calendar dates use (date.isoformat)."""
    try:
        parsed = datetime.strptime(text, "%Y-%m-%d").date()
        expected = parsed.isoformat() == text
    except ValueError:
        expected = False
    form_ok = engine_match(DATE, text)
    real = form_ok and not pd.isna(pd.to_datetime(pd.Series([text]), format="%Y-%m-%d", errors="coerce")[0])
    assert real == expected


@settings(max_examples=150, deadline=None)
@given(st.one_of(st.text(alphabet="0123456789-", max_size=8), st.integers(0, 9999).map(lambda y: f"{y:04d}")))
def test_month_rule_matches_python_calendar(text: str) -> None:
    """Reference: datetime.strptime(text + '-01', '%Y-%m-%d') in zero-padded YYYY-MM form."""
    try:
        expected = datetime.strptime(text + "-01", "%Y-%m-%d").strftime("%Y-%m") == text
    except ValueError:
        expected = False
    assert engine_match(MONTH, text) == expected


NUMBER_LIKE = st.text(alphabet="0123456789.+-eE,naifNI _", min_size=0, max_size=8)


@settings(max_examples=200, deadline=None)
@given(st.one_of(NUMBER_LIKE, st.floats(allow_nan=False, allow_infinity=False).map(repr)))
def test_number_rule_matches_python_float_and_the_loader(text: str) -> None:
    """Reference: Python's float() grammar (Python docs, built-in float()), minus what a CSV export must not
    contain: NaN/infinity words, underscores and surrounding spaces. Every accepted text must also cast
    in Arrow to the same value, or the load would fail after validation said yes."""
    try:
        value = float(text)
        expected = math.isfinite(value) and "_" not in text and text == text.strip() and text != ""
    except ValueError:
        expected = False
    # The suite's two checks: the text form, then the parsed value within +-FLOAT_MAX (finite).
    parsed = pd.to_numeric(pd.Series([text], dtype="str"), errors="coerce")[0]
    accepted = engine_match(NUMBER, text) and -FLOAT_MAX <= parsed <= FLOAT_MAX
    assert accepted == expected
    if accepted:
        assert pa.array([text]).cast(pa.float64())[0].as_py() == pytest.approx(float(text), rel=1e-15)


@settings(max_examples=150, deadline=None)
@given(st.one_of(NUMBER_LIKE, st.integers(-(10**16), 10**16).map(str)))
def test_count_rule_accepts_exactly_whole_numbers(text: str) -> None:
    """Reference: Python int() on ASCII digits; counts must be >= 0 and fit comfortably in BIGINT."""
    expected = text.isascii() and text.isdigit() and len(text) <= 15
    assert engine_match(COUNT, text) == expected
    if expected:
        assert pa.array([text]).cast(pa.int64())[0].as_py() == int(text) >= 0
