"""Run a kind's Great Expectations suite on a drop and turn the result into findings a person can act on.

GX is imported lazily (the import costs ~8 s of CPU) and one ephemeral context is kept per process. Runs are
serialised with a lock because validating different frames through one shared asset from several threads
gives silently wrong results (measured, shared/notes/great_expectations.md §5).
"""

from __future__ import annotations

import difflib
import logging
import threading
import time
from dataclasses import dataclass, field
from datetime import date
from typing import Any

import pandas as pd

from dyadcast.ingest.kinds import PUBLISHED_ON, Kind
from dyadcast.ingest.read import Drop
from dyadcast.ingest.suites import HELPER, PUBLISHED, add_helpers, build_expectations

RESULT_FORMAT = {"result_format": "SUMMARY", "partial_unexpected_count": 10}


@dataclass
class Finding:
    """One failed check: a one-line message, how to fix it, and the data rows (0-based) that show it."""

    check: str
    column: str
    message: str
    fix: str
    count: int | None = None
    rows: list[int] = field(default_factory=list)


@dataclass
class Validation:
    findings: list[Finding]
    notes: list[str]
    rows: int
    seconds: float
    result_json: dict[str, Any] = field(default_factory=dict)

    @property
    def ok(self) -> bool:
        return not self.findings


class SuiteRunner:
    """One ephemeral GX context with one pandas batch definition, and the suites built so far."""

    def __init__(self) -> None:
        started = time.perf_counter()
        import great_expectations as gx
        import great_expectations.expectations as gxe
        from great_expectations.data_context.types.base import ProgressBarsConfig
        from great_expectations.execution_engine import pandas_execution_engine

        # GX fingerprints every batch under 1 GB with an md5 of all its rows; nothing reads that marker and it
        # cost 12 % of a 9.6 M-row ingest (bench/README.md). 0 turns the fingerprint off for this process.
        pandas_execution_engine.HASH_THRESHOLD = 0

        logging.captureWarnings(False)  # GX turns this on at import and would swallow every later warning
        # GX gives some of its own loggers an explicit INFO level, so quieting the parent is not enough
        for name in [n for n in logging.root.manager.loggerDict if n.startswith("great_expectations")]:
            logging.getLogger(name).setLevel(logging.WARNING)
        logging.getLogger("great_expectations").setLevel(logging.WARNING)
        self._gx, self._gxe = gx, gxe
        self.context = gx.get_context(mode="ephemeral")  # never a file or cloud context found on disk
        self.context.variables.progress_bars = ProgressBarsConfig(globally=False)
        asset = self.context.data_sources.add_pandas("dyadcast_ingest").add_dataframe_asset("drop")
        self.batch_definition = asset.add_batch_definition_whole_dataframe("whole")
        self._suites: dict[tuple[str, bool, bool], Any] = {}
        self._lock = threading.Lock()
        self.startup_seconds = time.perf_counter() - started

    def suite(self, kind: Kind, has_published_on: bool, source_format: str = "parquet") -> Any:
        """One suite per kind, in variants for history files (published_on) and for formats with nulls."""
        nulls = source_format != "csv"
        key = (kind.name, has_published_on, nulls)
        if key not in self._suites:
            name = f"{kind.name}{'_history' if has_published_on else ''}{'_nullable' if nulls else ''}_v1"
            suite = self._gx.ExpectationSuite(name=name)
            for expectation in build_expectations(self._gxe, kind, has_published_on, nulls):
                suite.add_expectation(expectation)
            self._suites[key] = suite
        return self._suites[key]

    def validate(self, frame: pd.DataFrame, kind: Kind, has_published_on: bool, source_format: str) -> Any:
        suite = self.suite(kind, has_published_on, source_format)
        with self._lock:
            batch = self.batch_definition.get_batch(batch_parameters={"dataframe": frame})
            return batch.validate(suite, result_format=RESULT_FORMAT)


_RUNNER: SuiteRunner | None = None
_RUNNER_LOCK = threading.Lock()


def runner_ready() -> bool:
    """True once GX has been imported in this process (the first validation pays ~8 s of CPU)."""
    return _RUNNER is not None


def get_runner() -> SuiteRunner:
    global _RUNNER
    with _RUNNER_LOCK:
        if _RUNNER is None:
            _RUNNER = SuiteRunner()
        return _RUNNER


def validate_drop(drop: Drop, kind: Kind, default_published: date, runner: SuiteRunner | None = None) -> Validation:
    started = time.perf_counter()
    columns = drop.columns
    has_pub = PUBLISHED_ON in columns
    frame = drop.table.to_pandas()
    add_helpers(frame, kind, has_pub, default_published)
    result = (runner or get_runner()).validate(frame, kind, has_pub, drop.source_format)
    findings, notes = interpret(result, drop, frame, kind, has_pub)
    return Validation(findings, notes, drop.table.num_rows, time.perf_counter() - started, result.to_json_dict())


def exception_message(evr: Any) -> str | None:
    """GX reports exceptions flat or keyed by metric id (shared/notes/gx_report_example.py)."""
    info = evr.exception_info or {}
    if "raised_exception" in info:
        return info["exception_message"] if info["raised_exception"] else None
    messages = [v.get("exception_message") for v in info.values() if v.get("raised_exception")]
    return "; ".join(dict.fromkeys(m for m in messages if m)) or None


def column_findings(columns: list[str], kind: Kind, has_pub: bool) -> tuple[list[Finding], list[str]]:
    """Name each missing and unexpected column, with the nearest expected name as a suggestion."""
    required = list(kind.required(has_pub))
    missing = [c for c in required if c not in columns]
    extra = [c for c in columns if c not in required]
    findings, notes = [], []
    fix = f"The header must be: {','.join(required)} (published_on is optional)."
    claimed: set[str] = set()
    for column in extra:
        guess = difflib.get_close_matches(column.strip().lower(), missing, n=1, cutoff=0.6)
        if guess:
            claimed.add(guess[0])
            findings.append(
                Finding("columns", column, f"column '{column}' is not expected; did you mean '{guess[0]}'?", fix)
            )
        elif kind.extra_columns_allowed:
            notes.append(f"extra column '{column}' is not part of the contract and was ignored")
        else:
            findings.append(Finding("columns", column, f"column '{column}' is not expected", fix))
    for column in missing:
        if column not in claimed:
            findings.append(Finding("columns", column, f"required column '{column}' is missing", fix))
    return findings, notes


def interpret(result: Any, drop: Drop, frame: pd.DataFrame, kind: Kind, has_pub: bool) -> tuple[list[Finding], list[str]]:
    findings: list[Finding] = []
    notes: list[str] = []
    columns_failed = False
    for evr in result.results:
        meta = evr.expectation_config.meta or {}
        if meta.get("check") == "columns":
            column_list, notes = column_findings(drop.columns, kind, has_pub)
            if not evr.success:
                columns_failed = True
                findings.extend(column_list or [Finding("columns", "", meta["what"], meta["fix"])])
    ordered = sorted(result.results, key=lambda evr: (evr.expectation_config.meta or {}).get("order", 999))
    for evr in ordered:
        meta = evr.expectation_config.meta or {}
        if evr.success or meta.get("check") == "columns":
            continue
        error = exception_message(evr)
        if error:
            if columns_failed and "does not exist" in error:
                continue  # a check of a missing column: the column finding already says it
            findings.append(
                Finding(
                    meta.get("check", "error"),
                    meta.get("column", ""),
                    f"{meta.get('column') or 'table'}: the check could not run ({error})",
                    "This is a fault of the checks, not necessarily of the file: report it to the dyadcast "
                    "maintainers with this report; the file is kept in quarantine until then.",
                )
            )
            continue
        findings.append(_finding(evr.result or {}, meta, drop, frame))
    return findings, notes


def _finding(result: dict[str, Any], meta: dict[str, Any], drop: Drop, frame: pd.DataFrame) -> Finding:
    check, column, what = meta["check"], meta["column"], meta["what"]
    if check == "rows":
        return Finding(check, "", what, meta["fix"], count=0)
    count = int(result.get("unexpected_count") or 0)
    total = int(result.get("element_count") or 0)
    rows = [int(i) for i in result.get("partial_unexpected_index_list") or []]
    examples = _duplicates(column, rows, drop, frame) if check == "unique" else ", ".join(
        _example(check, column, i, drop, frame) for i in rows[:3]
    )
    if check == "unique":
        message = f"{count} of {total} rows {what}"
    else:
        message = f"{column} {what} in {count} of {total} rows"
    message += f" (e.g. {examples})" if examples else ""
    return Finding(check, column, message, meta["fix"], count, rows)


def _duplicates(column: str, rows: list[int], drop: Drop, frame: pd.DataFrame) -> str:
    """Group repeated keys so the reader sees which lines clash with which."""
    lines: dict[str, list[int]] = {}
    for index in rows:
        lines.setdefault(",".join(str(frame.at[index, c]) for c in column.split(",")), []).append(drop.line_of(index))
    shown = list(lines.items())[:3]
    return ", ".join(f"{key} on {drop.row_label}s {', '.join(map(str, found))}" for key, found in shown)


def _example(check: str, column: str, index: int, drop: Drop, frame: pd.DataFrame) -> str:
    where = f"{drop.row_label} {drop.line_of(index)}"
    value = frame.at[index, column] if column in frame else None
    if check == "after_publication":
        published = frame.at[index, PUBLISHED]
        return f"{value!r} published {published:%Y-%m-%d} on {where}"
    if value is None or (not isinstance(value, str) and pd.isna(value)):
        return f"(null) on {where}"
    hint = value_hint(value) if check in ("count", "number") else ""
    return f"{value!r}{hint} on {where}"


def value_hint(value: Any) -> str:
    """Name the usual culprits so the fix is obvious from the one-line reason."""
    if value is None or (isinstance(value, float) and pd.isna(value)):
        return " (missing)"
    text = str(value).strip()
    if text == "":
        return " (empty)"
    if text.lower() in {"nan", "n/a", "na", "null", "none", "-", "..", "inf", "-inf"}:
        return " (text, not a number)"
    if "," in text:
        return " (thousands separator or decimal comma)"
    if text.startswith("-"):
        return " (negative)"
    if "." in text or "e" in text.lower():
        return " (not a whole number)"
    return ""


def is_helper(column: str) -> bool:
    return column.startswith(HELPER)
