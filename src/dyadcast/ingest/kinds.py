"""The drop contract: which file kinds exist, their columns, keys and value rules, and how a file is named.

Everything that validation, loading and the rejection report need to know about a kind lives here, so the
contract of DESIGN.md is written down once.
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from datetime import date
from pathlib import Path

EXTENSIONS = (".csv", ".parquet")
PUBLISHED_ON = "published_on"
# A publication date in the file name: `flows_2025-03-15.csv` was published on 2025-03-15.
NAME_DATE = re.compile(r"_(\d{4}-\d{2}-\d{2})$")


@dataclass(frozen=True)
class Number:
    """A numeric column and its bounds (None: unbounded); `optional` lets a cell be empty (stored as NULL)."""

    column: str
    min_value: float | None = None
    max_value: float | None = None
    strict_min: bool = False
    optional: bool = False

    def describe(self) -> str:
        if self.min_value is not None and self.max_value is not None:
            return f"between {self.min_value:g} and {self.max_value:g}"
        if self.min_value is not None:
            return f"a finite number {'greater than' if self.strict_min else 'at least'} {self.min_value:g}"
        return "a finite number"


@dataclass(frozen=True)
class Kind:
    name: str
    table: str
    columns: tuple[str, ...]  # required, in contract order
    key: tuple[str, ...]
    codes: tuple[str, ...] = ()  # 3-letter upper-case country codes
    month: str | None = None  # a `YYYY-MM` column
    date: str | None = None  # a `YYYY-MM-DD` column
    counts: tuple[str, ...] = ()  # whole numbers >= 0
    numbers: tuple[Number, ...] = ()
    flags: tuple[str, ...] = ()  # 0 or 1
    names: tuple[str, ...] = ()  # indicator / signal names: they become feature column names
    extra_columns_allowed: bool = False

    @property
    def period(self) -> str | None:
        """The column that may not lie after the publication date."""
        return self.month or self.date

    def required(self, has_published_on: bool) -> tuple[str, ...]:
        return (*self.columns, PUBLISHED_ON) if has_published_on else self.columns

    def unique_key(self, has_published_on: bool) -> tuple[str, ...]:
        """A history file holds several vintages, so its key includes the publication date."""
        return (*self.key, PUBLISHED_ON) if has_published_on else self.key


KINDS: dict[str, Kind] = {
    k.name: k
    for k in (
        Kind(
            "flows",
            "raw_flows",
            ("origin", "destination", "month", "arrivals"),
            key=("origin", "destination", "month"),
            codes=("origin", "destination"),
            month="month",
            counts=("arrivals",),
        ),
        Kind(
            "origin_indicators",
            "raw_origin_indicators",
            ("country", "month", "indicator", "value"),
            key=("country", "month", "indicator"),
            codes=("country",),
            month="month",
            numbers=(Number("value"),),
            names=("indicator",),
        ),
        Kind(
            "destination_indicators",
            "raw_destination_indicators",
            ("country", "month", "indicator", "value"),
            key=("country", "month", "indicator"),
            codes=("country",),
            month="month",
            numbers=(Number("value"),),
            names=("indicator",),
        ),
        Kind(
            "dyad_attributes",
            "raw_dyad_attributes",
            ("origin", "destination", "distance_km", "contiguous", "common_language", "colonial_tie", "diaspora"),
            key=("origin", "destination"),
            codes=("origin", "destination"),
            numbers=(Number("distance_km", min_value=0, strict_min=True), Number("diaspora", 0, optional=True)),
            flags=("contiguous", "common_language", "colonial_tie"),
            extra_columns_allowed=True,
        ),
        Kind(
            "signals",
            "raw_signals",
            ("country", "date", "signal", "intensity"),
            key=("country", "date", "signal"),
            codes=("country",),
            date="date",
            numbers=(Number("intensity", 0, 100),),
            names=("signal",),
        ),
    )
}


class UnknownKind(ValueError):
    """The file name does not say which kind of data the file holds."""


def known_kinds_text() -> str:
    return ", ".join(KINDS) + f" (extensions {', '.join(EXTENSIONS)})"


def kind_of(path: Path) -> Kind:
    """Longest matching prefix wins, so `origin_indicators_x.csv` never reads as some shorter kind."""
    suffix = path.suffix.lower()
    if suffix not in EXTENSIONS:
        raise UnknownKind(
            f"unknown extension {suffix or '(none)'!r}: name the file <kind>[_YYYY-MM-DD].csv or .parquet, "
            f"where <kind> is one of {known_kinds_text()}"
        )
    stem = path.stem
    matches = [k for k in KINDS if stem == k or stem.startswith(k + "_") or stem.startswith(k + "-")]
    if not matches:
        raise UnknownKind(
            "unknown kind: the file name must start with one of the known kinds "
            f"{known_kinds_text()}; rename it, e.g. flows_2025-03-15.csv"
        )
    return KINDS[max(matches, key=len)]


def date_in_name(path: Path) -> date | None:
    """The `_YYYY-MM-DD` suffix right before the extension; None when absent.

    A suffix that looks like a date but is not one (`_2025-02-30`) raises, because silently falling back to
    the load date would mis-date a whole vintage.
    """
    match = NAME_DATE.search(path.stem)
    if not match:
        return None
    try:
        return date.fromisoformat(match.group(1))
    except ValueError as exc:
        raise UnknownKind(
            f"the publication date {match.group(1)!r} in the file name is not a real date; "
            "rename the file with a valid _YYYY-MM-DD suffix"
        ) from exc
