"""Month arithmetic on 'YYYY-MM' strings and first-of-month dates, kept in one place."""

from __future__ import annotations

import re
from datetime import date

import numpy as np

MONTH_PATTERN = re.compile(r"^\d{4}-(?:0[1-9]|1[0-2])$")


def parse_month(text: str) -> date:
    """'2024-03' -> date(2024, 3, 1); a clear error for anything else."""
    if not isinstance(text, str) or not MONTH_PATTERN.match(text):
        raise ValueError(f"month {text!r} is not of the form YYYY-MM with a month 01-12")
    return date(int(text[:4]), int(text[5:7]), 1)


def format_month(day: date) -> str:
    return f"{day.year:04d}-{day.month:02d}"


def add_months(day: date, months: int) -> date:
    index = day.year * 12 + (day.month - 1) + months
    return date(index // 12, index % 12 + 1, 1)


def month_index(day: date) -> int:
    return day.year * 12 + day.month - 1


def month_from_index(index: int) -> date:
    """month_index(day) -> the first day of that month."""
    return date(index // 12, index % 12 + 1, 1)


def month_starts(indices: np.ndarray) -> np.ndarray:
    """Many month indices -> their first days as datetime64[us] (the dtype of the feature frame's `month`)."""
    return (np.asarray(indices) - 1970 * 12).astype("datetime64[M]").astype("datetime64[us]")


def months_between(start: date, end: date) -> int:
    return month_index(end) - month_index(start)


def month_range(start: date, end: date) -> list[date]:
    return [add_months(start, k) for k in range(months_between(start, end) + 1)]
