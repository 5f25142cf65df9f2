"""Write a scenario as drop files in the file contract the ingest stage reads.

Month M is published on the 10th of M+1 together with the revision of M-1. A flows file is complete for
each (destination, month) it mentions, so each version lists the positive rows and, for a destination with
no positive arrivals that month, one explicit zero row: every destination-month is reported.
Files are written in a temporary folder beside `directory` and then moved in, so an ingest that runs at the
same time never sees half a file.
"""

from __future__ import annotations

import os
import shutil
import tempfile
from collections.abc import Callable
from datetime import date
from pathlib import Path

import pandas as pd

from dyadcast.demo.scenario import Scenario
from dyadcast.months import add_months, format_month, parse_month

KINDS = ("flows", "origin_indicators", "destination_indicators", "dyad_attributes", "signals")
PUBLICATION_DAY = 10
EXAMPLE_MONTH = "2025-01"
# Parquet carries types: measures are written as DOUBLE like the warehouse columns,
# counts and flags as BIGINT.
DOUBLE_COLUMNS = ("value", "intensity", "distance_km", "diaspora")


def publication_date(month: str) -> date:
    """Month M's figures come out on the 10th of the following month."""
    return add_months(parse_month(month), 1).replace(day=PUBLICATION_DAY)


def _previous(month: str) -> str:
    return format_month(add_months(parse_month(month), -1))


def reported_rows(version: pd.DataFrame, months: list[str]) -> pd.DataFrame:
    """Positive rows of `months`, plus a zero row per destination-month without any: all count as reported."""
    part = version[version.month.isin(months)]
    positive = part[part.arrivals > 0]
    seen = set(zip(positive.destination, positive.month, strict=True))
    origins = sorted(part.origin.unique())
    zeros = [
        (next(o for o in origins if o != d), d, m, 0)
        for d, m in sorted(set(zip(part.destination, part.month, strict=True)) - seen)
    ]
    zero_rows = pd.DataFrame(zeros, columns=["origin", "destination", "month", "arrivals"])
    out = pd.concat([positive, zero_rows.astype(positive.dtypes.to_dict())], ignore_index=True)
    return out.sort_values(["month", "destination", "origin"], ignore_index=True)


def _check_month(s: Scenario, month: str) -> None:
    parse_month(month)
    if not s.start <= month <= s.end:
        raise ValueError(
            f"month {month} is outside the scenario ({s.start}..{s.end}); pick a month inside it"
        )


def write_monthly_drop(
    s: Scenario, month: str, directory: Path, fmt: str = "csv", include_static: bool = False
) -> list[Path]:
    """What is published on publication_date(month); file names carry that date as a `_YYYY-MM-DD` suffix.

    Flows hold the first release of `month` and the full revision of the month before. Dyad attributes are
    static and published once (in the history drop); pass include_static=True to add them anyway.
    """
    _check_month(s, month)
    suffix = publication_date(month).isoformat()
    first = reported_rows(s.first_release, [month])
    prev = _previous(month)
    flows = (
        pd.concat([reported_rows(s.flows, [prev]), first], ignore_index=True) if prev >= s.start else first
    )
    frames = {
        "flows": flows,
        "origin_indicators": s.origin_indicators[s.origin_indicators.month == month],
        "destination_indicators": s.destination_indicators[s.destination_indicators.month == month],
        "signals": s.signals[s.signals.date.str.startswith(month)],
    }
    if include_static:
        frames["dyad_attributes"] = s.dyad_attributes
    return _write(frames, directory, fmt, lambda kind: f"{kind}_{suffix}")


def write_history_drop(s: Scenario, until_month: str, directory: Path, fmt: str = "csv") -> list[Path]:
    """Every vintage published up to publication_date(until_month), one file per kind with `published_on`.

    Flows: each month's first release and, for months before `until_month`, its revision one month later.
    """
    _check_month(s, until_month)
    months = [m for m in sorted(s.flows.month.unique()) if m <= until_month]
    pub = {m: publication_date(m).isoformat() for m in months}
    firsts = reported_rows(s.first_release, months).assign(published_on=lambda f: f.month.map(pub))
    revised_months = months[:-1]
    revisions = reported_rows(s.flows, revised_months).assign(
        published_on=lambda f: f.month.map(
            {m: pub[n] for m, n in zip(revised_months, months[1:], strict=True)}
        )
    )
    signal_month = s.signals.date.str[:7]
    frames = {
        "flows": pd.concat([firsts, revisions], ignore_index=True).sort_values(
            ["published_on", "month", "destination", "origin"], ignore_index=True
        ),
        "origin_indicators": _with_pub(s.origin_indicators, until_month, pub),
        "destination_indicators": _with_pub(s.destination_indicators, until_month, pub),
        "signals": s.signals[signal_month <= until_month].assign(published_on=signal_month.map(pub)),
        "dyad_attributes": s.dyad_attributes.assign(published_on=pub[months[0]]),
    }
    return _write(frames, directory, fmt, lambda kind: f"{kind}_history_through_{until_month}")


def _with_pub(frame: pd.DataFrame, until_month: str, pub: dict[str, str]) -> pd.DataFrame:
    part = frame[frame.month <= until_month]
    return part.assign(published_on=part.month.map(pub))


def _write(
    frames: dict[str, pd.DataFrame], directory: Path, fmt: str, stem: Callable[[str], str]
) -> list[Path]:
    if fmt not in ("csv", "parquet"):
        raise ValueError(f"fmt={fmt!r}: the drop contract accepts 'csv' or 'parquet'")
    directory = Path(directory)
    directory.mkdir(parents=True, exist_ok=True)
    staging = Path(tempfile.mkdtemp(prefix=".dyadcast-drop-", dir=directory.parent))
    written = []
    try:
        for kind in KINDS:
            if kind not in frames:
                continue
            name = f"{stem(kind)}.{fmt}"
            frame = frames[kind].reset_index(drop=True)
            if fmt == "csv":
                frame.to_csv(staging / name, index=False, lineterminator="\n")
            else:
                frame.astype({c: "float64" for c in DOUBLE_COLUMNS if c in frame}).to_parquet(
                    staging / name, index=False
                )
            os.replace(staging / name, directory / name)
            written.append(directory / name)
    finally:
        shutil.rmtree(staging, ignore_errors=True)
    return written


def write_examples(s: Scenario, directory: Path) -> list[Path]:
    """The committed `demo_data/` copy: the 2025-01 monthly drop, all five kinds, as CSV."""
    directory = Path(directory)
    for old in directory.glob("*.csv"):
        if old.name.startswith(KINDS):
            old.unlink()
    return write_monthly_drop(s, EXAMPLE_MONTH, directory, "csv", include_static=True)
