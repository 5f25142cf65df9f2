"""Build the manager's accuracy report: one self-contained HTML file, plus a dated copy per cutoff."""

from __future__ import annotations

import os
import re
from datetime import date
from pathlib import Path

import duckdb

from dyadcast.months import format_month
from dyadcast.report import sections
from dyadcast.report.collect import ReportData, collect
from dyadcast.report.page import page
from dyadcast.report.summaries import refresh_summaries
from dyadcast.workspace import Workspace

CURRENT_NAME = "accuracy.html"
DATED_PATTERN = re.compile(r"^accuracy_\d{4}-\d{2}\.html$")


def dated_name(cutoff: date) -> str:
    return f"accuracy_{format_month(cutoff)}.html"


def render(d: ReportData) -> str:
    """The whole page as a string (no I/O), in the order a manager reads it."""
    body = "".join([
        sections.header(d),
        sections.glance(d),
        sections.forecast_section(d),
        sections.skill_section(d),
        sections.coverage_section(d),
        sections.over_time_section(d),
        sections.surprises_section(d),
        sections.freshness_section(d),
        sections.glossary(),
        sections.footer(d),
    ])
    cutoff = format_month(d.cutoff) if d.cutoff else "no cutoff yet"
    return page(f"Arrivals forecast and accuracy, {cutoff}", body)


def _write_atomically(path: Path, text: str) -> None:
    """Readers (a browser, a file share) never see a half-written report."""
    tmp = path.with_name(f".{path.name}.tmp")
    tmp.write_text(text, encoding="utf-8")
    os.replace(tmp, path)


def build_report(con: duckdb.DuckDBPyConnection, ws: Workspace, cutoff: date | None = None) -> Path:
    """Write reports/accuracy.html and reports/accuracy_YYYY-MM.html for the cutoff; returns the first.

    cutoff None: the newest cutoff with a run. The dated copy keeps what the report said for that cutoff;
    building it again for the same cutoff replaces it. The accuracy summaries are brought up to date first
    (nothing to do on a read-only connection: the views then summarise the newest batches live).
    """
    refresh_summaries(con)
    config = ws.config()
    data = collect(con, cutoff, config.primary_model, config.horizon)
    ws.reports.mkdir(parents=True, exist_ok=True)
    own = dated_name(data.cutoff) if data.cutoff else None
    data.earlier_reports = sorted(
        (p.name for p in ws.reports.iterdir() if DATED_PATTERN.match(p.name) and p.name != own), reverse=True
    )
    text = render(data)
    if own:
        _write_atomically(ws.reports / own, text)
    current = ws.reports / CURRENT_NAME
    _write_atomically(current, text)
    return current
