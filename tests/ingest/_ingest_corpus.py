"""A generated corpus of malformed drop files (each with the reason it must be rejected for) and good ones.

Each bad file has exactly one problem, so the first finding, which becomes the one-line reason, is the one the
case names. Run `python tests/ingest/_ingest_corpus.py DIR` to write the corpus to a folder and look at it.
All data is invented; codes are from the user-assigned alpha-3 ranges.
"""

from __future__ import annotations

import io
import random
import sys
from dataclasses import dataclass
from pathlib import Path

import pyarrow as pa
import pyarrow.parquet as pq

FLOWS = "origin,destination,month,arrivals"
GOOD_FLOWS = ["XAA,QMA,2025-01,12", "XAB,QMA,2025-01,0", "XAA,QMB,2025-02,7"]
INDICATORS = "country,month,indicator,value"
DYADS = "origin,destination,distance_km,contiguous,common_language,colonial_tie,diaspora"
SIGNALS = "country,date,signal,intensity"


@dataclass(frozen=True)
class Case:
    name: str
    content: bytes
    reason: str  # must appear in the one-line reason (and so in the report)
    also: tuple[str, ...] = ()  # must appear in the report as well


def csv_bytes(header: str, rows: list[str], newline: str = "\n") -> bytes:
    return newline.join([header, *rows, ""]).encode("utf-8")


def parquet_bytes(table: pa.Table) -> bytes:
    sink = io.BytesIO()
    pq.write_table(table, sink)
    return sink.getvalue()


def with_row(index: int, row: str) -> list[str]:
    """The good flows with data row `index` (0-based) replaced: the file's line index + 2 is the bad one."""
    rows = list(GOOD_FLOWS)
    rows[index] = row
    return rows


def variant(arrivals: int) -> list[str]:
    """The good flows with other figures: files that must differ in content (and so in hash) from the rest."""
    return [row.rsplit(",", 1)[0] + f",{arrivals + i}" for i, row in enumerate(GOOD_FLOWS)]


def bad_cases() -> list[Case]:
    rng = random.Random(11)
    garbage = bytes([0, 159, 146, 150, 0]) + bytes(rng.randrange(256) for _ in range(2000))
    cases = [
        Case("flows_semicolon_2025-03-15.csv", csv_bytes(FLOWS.replace(",", ";"), ["XAA;QMA;2025-01;12"]),
             "wrong delimiter: the header is separated by semicolon ';'"),
        Case("flows_tab_2025-03-15.csv", csv_bytes(FLOWS.replace(",", "\t"), ["XAA\tQMA\t2025-01\t12"]),
             "wrong delimiter: the header is separated by tab"),
        Case("flows_missing_column_2025-03-15.csv", csv_bytes("origin,destination,month", ["XAA,QMA,2025-01"]),
             "required column 'arrivals' is missing"),
        Case("flows_misspelled_2025-03-15.csv", csv_bytes(FLOWS.replace("arrivals", "arivals"), GOOD_FLOWS),
             "column 'arivals' is not expected; did you mean 'arrivals'?"),
        Case("flows_header_space_2025-03-15.csv", csv_bytes(FLOWS.replace(",d", ", d"), GOOD_FLOWS),
             "column ' destination' is not expected; did you mean 'destination'?"),
        Case("flows_extra_column_2025-03-15.csv", csv_bytes(FLOWS + ",note", [r + ",x" for r in GOOD_FLOWS]),
             "column 'note' is not expected"),
        Case("flows_duplicate_header_2025-03-15.csv", csv_bytes("origin,origin,month,arrivals", GOOD_FLOWS),
             "column(s) ['origin'] appear more than once"),
        Case("origin_indicators_latin1_2025-03-15.csv",
             INDICATORS.encode() + b"\nXAA,2025-01,conflict_events,3\nXAA,2025-01,d\xe9placements,4\n",
             "not UTF-8 (line 3", ("re-save the file as UTF-8",)),
        Case("flows_utf16_2025-03-15.csv", csv_bytes(FLOWS, GOOD_FLOWS).decode().encode("utf-16"),
             "not UTF-8: the file is UTF-16 text"),
        Case("flows_empty_2025-03-15.csv", b"", "the file is empty"),
        Case("flows_header_only_2025-03-15.csv", csv_bytes(FLOWS, []), "the file has no data rows"),
        Case("flows_negative_2025-03-15.csv", csv_bytes(FLOWS, with_row(1, "XAB,QMA,2025-01,-4")),
             "arrivals is not a whole number >= 0 in 1 of 3 rows (e.g. '-4' (negative) on line 3)"),
        Case("flows_fractional_2025-03-15.csv", csv_bytes(FLOWS, with_row(2, "XAA,QMB,2025-02,2.5")),
             "'2.5' (not a whole number) on line 4"),
        Case("flows_thousands_quoted_2025-03-15.csv", csv_bytes(FLOWS, with_row(0, 'XAA,QMA,2025-01,"1,234"')),
             "'1,234' (thousands separator or decimal comma) on line 2"),
        Case("flows_thousands_unquoted_2025-03-15.csv", csv_bytes(FLOWS, with_row(1, "XAB,QMA,2025-01,1,234")),
             "have a different number of fields than the header (line 3 has 5, the header 4)"),
        Case("flows_nan_text_2025-03-15.csv", csv_bytes(FLOWS, with_row(0, "XAA,QMA,2025-01,NaN")),
             "'NaN' (text, not a number) on line 2"),
        Case("flows_blank_cell_2025-03-15.csv", csv_bytes(FLOWS, with_row(2, "XAA,QMB,2025-02,")),
             "'' (empty) on line 4"),
        Case("flows_duplicate_keys_2025-03-15.csv", csv_bytes(FLOWS, [*GOOD_FLOWS, "XAA,QMA,2025-01,13"]),
             "2 of 4 rows repeat a key (origin, destination, month)", ("XAA,QMA,2025-01 on lines 2, 5",)),
        Case("flows_month13_2025-03-15.csv", csv_bytes(FLOWS, with_row(1, "XAB,QMA,2026-13,1")),
             "month is not a month of the form YYYY-MM (month 01-12) in 1 of 3 rows (e.g. '2026-13' on line 3)"),
        Case("flows_lowercase_2025-03-15.csv", csv_bytes(FLOWS, with_row(0, "xaa,QMA,2025-01,12")),
             "origin is not a 3-letter upper-case country code in 1 of 3 rows (e.g. 'xaa' on line 2)"),
        Case("flows_two_letter_2025-03-15.csv", csv_bytes(FLOWS, with_row(2, "XAA,QM,2025-02,7")),
             "destination is not a 3-letter upper-case country code in 1 of 3 rows (e.g. 'QM' on line 4)"),
        Case("flows_code_space_2025-03-15.csv", csv_bytes(FLOWS, with_row(2, "XAA ,QMB,2025-02,7")),
             "origin is not a 3-letter upper-case country code in 1 of 3 rows (e.g. 'XAA ' on line 4)"),
        Case("flows_future_2025-03-15.csv", csv_bytes(FLOWS, with_row(1, "XAB,QMA,2025-04,3")),
             "month lies after the row's publication date in 1 of 3 rows (e.g. '2025-04' published 2025-03-15 on line 3)"),
        Case("flows_2025-02-30.csv", csv_bytes(FLOWS, variant(400)),
             "the publication date '2025-02-30' in the file name is not a real date"),
        Case("flows_history_duplicate.csv",
             csv_bytes(FLOWS + ",published_on", ["XAA,QMA,2025-01,1,2025-02-10", "XAA,QMA,2025-01,2,2025-02-10"]),
             "2 of 2 rows repeat a key (origin, destination, month, published_on)"),
        Case("flows_history_bad_published.csv",
             csv_bytes(FLOWS + ",published_on", ["XAA,QMA,2025-01,1,2025-02-10", "XAA,QMA,2025-02,2,15.03.2025"]),
             "published_on is not a date of the form YYYY-MM-DD in 1 of 2 rows (e.g. '15.03.2025' on line 3)"),
        Case("signals_us_date_2025-03-15.csv", csv_bytes(SIGNALS, ["XAA,2025-03-01,search_intensity,40",
                                                                   "XAA,03/15/2025,search_intensity,41"]),
             "date is not a date of the form YYYY-MM-DD in 1 of 2 rows (e.g. '03/15/2025' on line 3)"),
        Case("signals_feb30_2025-03-15.csv", csv_bytes(SIGNALS, ["XAA,2025-02-30,search_intensity,40"]),
             "date is not a real calendar date in 1 of 1 rows (e.g. '2025-02-30' on line 2)"),
        Case("signals_intensity_150_2025-03-15.csv", csv_bytes(SIGNALS, ["XAA,2025-03-01,search_intensity,150"]),
             "intensity is not between 0 and 100 in 1 of 1 rows (e.g. '150' on line 2)"),
        Case("signals_history_future.csv",
             csv_bytes(SIGNALS + ",published_on", ["XAA,2025-03-20,search_intensity,10,2025-03-15"]),
             "date lies after the row's publication date in 1 of 1 rows (e.g. '2025-03-20' published 2025-03-15"),
        Case("origin_indicators_na_text_2025-03-15.csv", csv_bytes(INDICATORS, ["XAA,2025-01,conflict_events,n/a"]),
             "value is not a number in 1 of 1 rows (e.g. 'n/a' (text, not a number) on line 2)"),
        Case("destination_indicators_bad_name_2025-03-15.csv",
             csv_bytes(INDICATORS, ["QMA,2025-01,Recognition Rate,0.4"]),
             "indicator is not a lower-case name"),
        Case("dyad_attributes_zero_distance_2025-03-15.csv", csv_bytes(DYADS, ["XAA,QMA,0,1,0,0,100"]),
             "distance_km is not a finite number greater than 0 in 1 of 1 rows"),
        Case("dyad_attributes_flag_2_2025-03-15.csv", csv_bytes(DYADS, ["XAA,QMA,120.5,2,0,0,100"]),
             "contiguous is not 0 or 1 in 1 of 1 rows (e.g. '2' on line 2)"),
        Case("dyad_attributes_misspelled_2025-03-15.csv",
             csv_bytes(DYADS.replace("diaspora", "diaspra"), ["XAA,QMA,120.5,1,0,0,100"]),
             "column 'diaspra' is not expected; did you mean 'diaspora'?"),
        Case("flows_wrong_types_2025-03-15.parquet",
             parquet_bytes(pa.table({"origin": ["XAA"], "destination": ["QMA"], "month": ["2025-01"],
                                     "arrivals": pa.array([12.0], pa.float64())})),
             "Parquet column type(s) wrong: column 'arrivals' has type double; expected integer"),
        Case("signals_string_intensity_2025-03-15.parquet",
             parquet_bytes(pa.table({"country": ["XAA"], "date": ["2025-03-01"], "signal": ["search_intensity"],
                                     "intensity": ["40"]})),
             "column 'intensity' has type string; expected integer or floating"),
        Case("flows_null_2025-03-15.parquet",
             parquet_bytes(pa.table({"origin": ["XAA", "XAB"], "destination": ["QMA", "QMA"],
                                     "month": ["2025-01", "2025-01"], "arrivals": pa.array([3, None], pa.int64())})),
             "arrivals is empty (null) in 1 of 2 rows", ("row 2",)),
        Case("flows_unclosed_quote_2025-03-15.csv", csv_bytes(FLOWS, with_row(1, 'XAB,QMA,2025-01,"4')),
             "a value in column 'arrivals' contains a line break (line 3): an unclosed quote?"),
        Case("flows_newline_in_code_2025-03-15.parquet",
             parquet_bytes(pa.table({"origin": ["XAA", "XAB\n"], "destination": ["QMA", "QMA"],
                                     "month": ["2025-01", "2025-01"], "arrivals": [3, 4]})),
             "a value in column 'origin' contains a line break (row 2)"),
        Case("flows_not_parquet_2025-03-15.parquet", csv_bytes(FLOWS, variant(100)), "not a readable Parquet file"),
        Case("flows_parquet_inside_2025-03-15.csv",
             parquet_bytes(pa.table({"origin": ["XAA"]})), "not a CSV text file: the content is a Parquet file"),
        Case("flows_garbage_2025-03-15.csv", garbage, "not a CSV text file: the content is binary"),
        Case("flows_workbook_2025-03-15.csv", b"PK\x03\x04" + garbage,
             "not a CSV text file: the content is a zip archive or an Excel workbook"),
        Case("arrivals_2025-03-15.csv", csv_bytes(FLOWS, variant(200)),
             "unknown kind: the file name must start with one of the known kinds flows, origin_indicators, "
             "destination_indicators, dyad_attributes, signals"),
        Case("flows_2025-03-15.txt", csv_bytes(FLOWS, variant(300)), "unknown extension '.txt'"),
    ]
    assert len({c.name for c in cases}) == len(cases)
    contents = [c.content for c in cases] + [content for content, _kind, _rows in good_files().values()]
    assert len(set(contents)) == len(contents), "equal contents would be skipped as already loaded"
    return cases


def good_files() -> dict[str, tuple[bytes, str, int]]:
    """name -> (content, kind, data rows). Each must load beside the bad ones in the same drop."""
    files = {
        "flows_2025-03-15.csv": (csv_bytes(FLOWS, GOOD_FLOWS), "flows", 3),
        # A UTF-8 byte-order mark and Windows line endings alone are not errors.
        "flows_bom_2025-03-16.csv": (
            b"\xef\xbb\xbf" + csv_bytes(FLOWS, ["XAC,QMA,2025-02,5", "XAC,QMB,2025-02,0"], newline="\r\n"),
            "flows", 2,
        ),
        "flows_2025-03-17.parquet": (
            parquet_bytes(pa.table({"origin": ["XAD", "XAD"], "destination": ["QMA", "QMC"],
                                    "month": ["2025-02", "2025-02"], "arrivals": pa.array([4, 9], pa.int32())})),
            "flows", 2,
        ),
        "flows_history.csv": (
            csv_bytes(FLOWS + ",published_on", ["XAA,QMA,2024-12,10,2025-01-10", "XAA,QMA,2024-12,11,2025-02-10",
                                                "XAB,QMA,2025-01,3,2025-02-10"]),
            "flows", 3,
        ),
        "origin_indicators_2025-03-15.csv": (
            csv_bytes(INDICATORS, ["XAA,2025-02,conflict_events,17", "XAA,2025-02,gdp_growth,-1.25e0"]),
            "origin_indicators", 2,
        ),
        "destination_indicators_2025-03-15.parquet": (
            parquet_bytes(pa.table({"country": ["QMA", "QMA"], "month": ["2025-02", "2025-02"],
                                    "indicator": ["recognition_rate", "policy_openness"], "value": [0.4, 7]})),
            "destination_indicators", 2,
        ),
        "dyad_attributes_2025-03-15.csv": (
            csv_bytes(DYADS + ",source", ["XAA,QMA,120.5,1,0,0,,survey", "XAB,QMA,88,0,1,1,2500,survey"]),
            "dyad_attributes", 2,
        ),
        "signals_2025-03-15.csv": (
            csv_bytes(SIGNALS, ["XAA,2025-03-01,search_intensity,0", "XAA,2025-03-02,search_intensity,100",
                                "XAB,2025-03-01,search_intensity,37.5"]),
            "signals", 3,
        ),
    }
    return files


def write_corpus(directory: Path) -> list[Path]:
    directory.mkdir(parents=True, exist_ok=True)
    written = []
    for case in bad_cases():
        (directory / case.name).write_bytes(case.content)
        written.append(directory / case.name)
    for name, (content, _kind, _rows) in good_files().items():
        (directory / name).write_bytes(content)
        written.append(directory / name)
    return written


if __name__ == "__main__":
    for path in write_corpus(Path(sys.argv[1] if len(sys.argv) > 1 else "ingest-corpus")):
        print(path)
