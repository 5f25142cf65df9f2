"""One Great Expectations suite per file kind, built in code from the contract in `kinds.py`.

Each expectation carries in its `meta` the words the rejection report needs (`check`, `column`, `what`,
`fix`), so a failed result explains itself. Checks of derived values (calendar dates, bounds, the
publication date) run on helper columns named `__dc_*` that `add_helpers` computes before validation.
Regexes are anchored and use only non-capturing groups (pandas searches rather than matches, and warns on
capturing groups).
"""

from __future__ import annotations

import sys
from collections.abc import Callable
from datetime import date
from typing import Any

import numpy as np
import pandas as pd

from dyadcast.ingest.kinds import PUBLISHED_ON, Kind

HELPER = "__dc_"
PERIOD = HELPER + "period_start"
PUBLISHED = HELPER + "published"

CODE = r"^[A-Z]{3}$"
MONTH = r"^[0-9]{4}-(?:0[1-9]|1[0-2])$"
DATE = r"^[0-9]{4}-(?:0[1-9]|1[0-2])-(?:0[1-9]|[12][0-9]|3[01])$"
COUNT = r"^[0-9]{1,15}$"
_NUM = r"[+-]?(?:[0-9]+(?:\.[0-9]*)?|\.[0-9]+)(?:[eE][+-]?[0-9]+)?"
NUMBER = rf"^{_NUM}$"
OPTIONAL_NUMBER = rf"^(?:{_NUM})?$"
FLAG = r"^[01]$"
NAME = r"^[a-z][a-z0-9_]{0,62}$"
FLOAT_MAX = sys.float_info.max

FIX_COUNT = (
    "Write arrivals as digits only: no minus sign, decimals, thousands separators or text such as NaN or n/a. "
    "If a figure is unknown, leave the row out (remember that a listed destination-month counts every "
    "unlisted origin as zero)."
)
FIX_NUMBER = (
    "Write numbers with a dot as the decimal separator and without thousands separators; NaN, n/a and "
    "similar text are not numbers."
)


def form_flag(column: str) -> str:
    return f"{HELPER}{column}_form_ok"


def day_column(column: str) -> str:
    return f"{HELPER}{column}_day"


def number_column(column: str) -> str:
    return f"{HELPER}{column}_number"


def helper_columns(kind: Kind, has_published_on: bool) -> list[str]:
    names = [PERIOD, PUBLISHED] if kind.period else []
    dated = [c for c in (kind.date, PUBLISHED_ON if has_published_on else None) if c]
    names += [form_flag(c) for c in dated] + [day_column(c) for c in dated]
    return names + [number_column(n.column) for n in kind.numbers]


def _per_distinct(text: pd.Series, parse: Callable[[pd.Series], pd.Series]) -> pd.Series:
    """Apply `parse` once per distinct value: months and dates repeat, so 2M rows hold a few hundred values."""
    codes, uniques = pd.factorize(text, use_na_sentinel=True)
    parsed = parse(pd.Series(uniques, dtype=text.dtype))
    if (codes < 0).any():
        parsed = pd.concat([parsed, pd.Series([None], dtype=parsed.dtype)], ignore_index=True)
        codes = np.where(codes < 0, len(parsed) - 1, codes)
    return pd.Series(parsed.to_numpy()[codes], index=text.index)


def add_helpers(frame: pd.DataFrame, kind: Kind, has_published_on: bool, default_published: date) -> pd.DataFrame:
    """Derived columns the suite checks: parsed dates, numbers and the publication date of every row.

    A helper is only computed when its source column exists; the column-set check reports the rest.
    """
    out = frame
    dated = [c for c in (kind.date, PUBLISHED_ON if has_published_on else None) if c and c in frame]
    for column in dated:
        text = frame[column]
        out[form_flag(column)] = _per_distinct(text, lambda u: u.str.fullmatch(DATE).fillna(False).astype(bool))
        out[day_column(column)] = _per_distinct(text, lambda u: pd.to_datetime(u, format="%Y-%m-%d", errors="coerce"))
    if kind.period and kind.period in frame:
        if kind.month:
            out[PERIOD] = _per_distinct(frame[kind.month], lambda u: pd.to_datetime(u, format="%Y-%m", errors="coerce"))
        else:
            out[PERIOD] = out[day_column(kind.period)]
    if kind.period:
        if has_published_on and PUBLISHED_ON in frame:
            out[PUBLISHED] = out[day_column(PUBLISHED_ON)]
        else:
            out[PUBLISHED] = pd.Series(pd.Timestamp(default_published), index=frame.index).astype("datetime64[us]")
    for number in kind.numbers:
        if number.column in frame:
            out[number_column(number.column)] = pd.to_numeric(frame[number.column], errors="coerce")
    return out


def _meta(check: str, column: str, what: str, fix: str) -> dict[str, Any]:
    return {"check": check, "column": column, "what": what, "fix": fix}


def build_expectations(gxe: Any, kind: Kind, has_published_on: bool, nulls_possible: bool = True) -> list[Any]:
    """The suite of one kind (with or without a published_on column), in the order a report reads best.

    `nulls_possible=False` (CSV: the reader turns empty cells into '' rather than null) leaves out the
    not-null checks, which could never fail and cost ~10 ms each per file.
    """
    from great_expectations.expectations.row_conditions import Column as GxColumn  # GX is imported by now

    required = kind.required(has_published_on)
    out: list[Any] = [
        gxe.ExpectTableRowCountToBeBetween(
            min_value=1,
            meta=_meta(
                "rows",
                "",
                "the file has no data rows (it is empty or holds only the header line)",
                "Export the data rows as well as the header.",
            ),
        ),
        gxe.ExpectTableColumnsToMatchSet(
            column_set=[*required, *helper_columns(kind, has_published_on)],
            exact_match=not kind.extra_columns_allowed,
            meta=_meta("columns", "", "the columns do not match the contract", f"The header must be: {','.join(required)}"),
        ),
    ]

    def regex(column: str, pattern: str, check: str, what: str, fix: str) -> None:
        out.append(gxe.ExpectColumnValuesToMatchRegex(column=column, regex=pattern, meta=_meta(check, column, what, fix)))

    optional = {n.column for n in kind.numbers if n.optional}
    for column in required if nulls_possible else ():
        if column not in optional:
            out.append(
                gxe.ExpectColumnValuesToNotBeNull(
                    column=column,
                    meta=_meta("present", column, "is empty (null)", "Fill every cell of the required columns."),
                )
            )
    for column in kind.codes:
        regex(
            column,
            CODE,
            "code",
            "is not a 3-letter upper-case country code",
            "Use the ISO 3166-1 alpha-3 form: exactly three capital letters A-Z (e.g. XAB); no lower case, "
            "no 2-letter codes, no spaces.",
        )
    if kind.month:
        regex(kind.month, MONTH, "month", "is not a month of the form YYYY-MM (month 01-12)", "Write months as YYYY-MM, e.g. 2025-03.")
    for column in [c for c in (kind.date, PUBLISHED_ON if has_published_on else None) if c]:
        regex(
            column,
            DATE,
            "date_form",
            "is not a date of the form YYYY-MM-DD",
            "Write dates as YYYY-MM-DD, e.g. 2025-03-15 (not 03/15/2025 or 15.03.2025).",
        )
        out.append(
            gxe.ExpectColumnValuesToNotBeNull(
                column=day_column(column),
                row_condition=GxColumn(form_flag(column)) == True,  # noqa: E712 - builds a GX condition
                meta=_meta("date_real", column, "is not a real calendar date", "Check day and month (there is no 2025-02-30)."),
            )
        )
    if kind.period:
        out.append(
            gxe.ExpectColumnPairValuesAToBeGreaterThanB(
                column_A=PUBLISHED,
                column_B=PERIOD,
                or_equal=True,
                ignore_row_if="either_value_is_missing",
                meta=_meta(
                    "after_publication",
                    kind.period,
                    "lies after the row's publication date",
                    "Data cannot describe a period after it was published: check the "
                    f"{kind.period}, and the publication date (the published_on column, else the _YYYY-MM-DD "
                    "suffix of the file name, else the day of loading).",
                ),
            )
        )
    for column in kind.counts:
        regex(column, COUNT, "count", "is not a whole number >= 0", FIX_COUNT)
    for number in kind.numbers:
        fix = FIX_NUMBER + (" Leave the cell empty when the value is unknown." if number.optional else "")
        regex(number.column, OPTIONAL_NUMBER if number.optional else NUMBER, "number", "is not a number", fix)
        # Always bounded: '1e400' has the form of a number but is infinite as a float.
        out.append(
            gxe.ExpectColumnValuesToBeBetween(
                column=number_column(number.column),
                min_value=-FLOAT_MAX if number.min_value is None else number.min_value,
                max_value=FLOAT_MAX if number.max_value is None else number.max_value,
                strict_min=number.strict_min,
                meta=_meta("bound", number.column, f"is not {number.describe()}", f"{number.column} must be {number.describe()}."),
            )
        )
    for column in kind.flags:
        regex(column, FLAG, "flag", "is not 0 or 1", "Write flags as 0 (no) or 1 (yes).")
    for column in kind.names:
        regex(
            column,
            NAME,
            "name",
            "is not a lower-case name (a-z, 0-9, _; starting with a letter)",
            "Names become feature column names: use lower case letters, digits and underscores, e.g. conflict_events.",
        )
    key = list(kind.unique_key(has_published_on))
    out.append(
        gxe.ExpectCompoundColumnsToBeUnique(
            column_list=key,
            meta=_meta(
                "unique",
                ",".join(key),
                f"repeat a key ({', '.join(key)}) that another row also has",
                "Each key may appear once per file (once per published_on in a history file): remove or "
                "merge the duplicate rows. A correction belongs in a later file, which is kept as a new vintage.",
            ),
        )
    )
    for position, expectation in enumerate(out):
        expectation.meta["order"] = position  # GX returns results in no fixed order; reports follow the suite
    return out
