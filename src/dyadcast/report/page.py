"""HTML building blocks for the report: escaping, number formats, tables and the page shell.

Every string that may come from data goes through `esc` (or `table`), so a country label or a file name
can never become markup. The page has no scripts and fetches nothing: all CSS is inline.
"""

from __future__ import annotations

import html
import math
from collections.abc import Iterable, Sequence
from typing import Any

import pandas as pd

CSS = """
:root { --ink: #1b1b1b; --muted: #555; --rule: #d0d0d0; --band: #f4f4f2; --warn: #8a4b00; --accent: #0072b2; }
* { box-sizing: border-box; }
body { margin: 0; color: var(--ink); background: #fff;
       font: 16px/1.5 system-ui, -apple-system, "Segoe UI", Roboto, "Helvetica Neue", Arial, sans-serif; }
main { max-width: 1040px; margin: 0 auto; padding: 24px 28px 48px; }
h1 { font-size: 1.7rem; margin: 0 0 4px; }
h2 { font-size: 1.3rem; margin: 36px 0 8px; padding-top: 12px; border-top: 2px solid var(--rule); }
h3 { font-size: 1.05rem; margin: 20px 0 6px; }
p { margin: 6px 0 10px; }
.meta { color: var(--muted); margin: 0 0 16px; }
.caution { border: 3px solid var(--warn); background: #fff6e8; padding: 14px 18px; margin: 16px 0 20px;
           border-radius: 4px; }
.caution strong { color: var(--warn); font-size: 1.05rem; }
.glance { background: var(--band); padding: 12px 18px; border-radius: 4px; }
.glance li { margin: 4px 0; }
.empty { color: var(--muted); font-style: italic; }
.note { color: var(--muted); font-size: 0.9rem; }
table { border-collapse: collapse; margin: 8px 0 16px; font-size: 0.9rem; }
caption { caption-side: top; text-align: left; padding: 0 0 4px; white-space: nowrap; }
th, td { padding: 4px 10px; border-bottom: 1px solid var(--rule); text-align: left; vertical-align: top; }
th { background: var(--band); font-weight: 600; }
td.num, th.num { text-align: right; font-variant-numeric: tabular-nums; white-space: nowrap; }
figure { margin: 8px 0 16px; }
figure svg { max-width: 100%; height: auto; display: block; }
figcaption { color: var(--muted); font-size: 0.9rem; }
nav ul { columns: 2; padding-left: 20px; }
footer { margin-top: 40px; color: var(--muted); font-size: 0.85rem; }
"""


def esc(value: Any) -> str:
    """Text for HTML: escapes <, >, & and quotes; None becomes an empty string."""
    return "" if value is None else html.escape(str(value), quote=True)


def is_missing(value: Any) -> bool:
    if value is None:
        return True
    try:
        return bool(pd.isna(value))
    except (TypeError, ValueError):
        return False


def fmt_count(value: Any) -> str:
    """Arrivals: thousands separators; one decimal below 10 so small dyad quantiles do not all read 0."""
    if is_missing(value):
        return "–"
    number = float(value)
    if 0 < abs(number) < 0.05:
        return "<0.1" if number > 0 else ">-0.1"
    if abs(number) < 10 and not number.is_integer():
        return f"{number:,.1f}"
    return f"{round(number):,}"


def fmt_pct(value: Any, digits: int = 0) -> str:
    return "–" if is_missing(value) else f"{100 * float(value):.{digits}f} %"


def fmt_ratio(value: Any) -> str:
    return "–" if is_missing(value) or math.isinf(float(value)) else f"{float(value):.2f}"


def fmt_month(value: Any) -> str:
    return "–" if is_missing(value) else pd.Timestamp(value).strftime("%Y-%m")


def fmt_day(value: Any) -> str:
    return "–" if is_missing(value) else pd.Timestamp(value).strftime("%Y-%m-%d")


def fmt_interval(low: Any, high: Any) -> str:
    return f"{fmt_count(low)}–{fmt_count(high)}"


def fmt_point_interval(median: Any, low: Any, high: Any, label: str = "90 %") -> str:
    """A point value always travels with its interval, so nobody reads the median alone."""
    return f"{fmt_count(median)} ({label}: {fmt_interval(low, high)})"


def table(rows: Iterable[Sequence[Any]], headers: Sequence[str], numeric: Sequence[bool] | None = None,
          caption: str | None = None) -> str:
    """An HTML table; every cell is escaped. `numeric` right-aligns columns of figures."""
    numeric = list(numeric or [False] * len(headers))
    head = "".join(f'<th scope="col"{_num(n)}>{esc(h)}</th>' for h, n in zip(headers, numeric, strict=True))
    body = []
    for row in rows:
        cells = "".join(f"<td{_num(n)}>{esc(v)}</td>" for v, n in zip(row, numeric, strict=True))
        body.append(f"<tr>{cells}</tr>")
    cap = f"<caption class=\"note\">{esc(caption)}</caption>" if caption else ""
    return f"<table>{cap}<thead><tr>{head}</tr></thead><tbody>{''.join(body)}</tbody></table>"


def _num(flag: bool) -> str:
    return ' class="num"' if flag else ""


def paragraph(text: str, cls: str | None = None) -> str:
    attr = f' class="{cls}"' if cls else ""
    return f"<p{attr}>{esc(text)}</p>"


def empty(text: str) -> str:
    """What a section says when there is nothing to show yet (instead of failing or staying blank)."""
    return paragraph(text, "empty")


def section(anchor: str, title: str, body: str) -> str:
    return f'<section id="{esc(anchor)}"><h2>{esc(title)}</h2>{body}</section>'


def figure(svg: str, caption: str) -> str:
    return f"<figure>{svg}<figcaption>{esc(caption)}</figcaption></figure>"


def bullet_list(items: Iterable[str], cls: str | None = None) -> str:
    attr = f' class="{cls}"' if cls else ""
    return f"<ul{attr}>" + "".join(f"<li>{esc(item)}</li>" for item in items) + "</ul>"


def page(title: str, body: str) -> str:
    """The whole document: one file, inline CSS, no scripts, nothing fetched."""
    return (
        "<!DOCTYPE html>\n"
        '<html lang="en"><head><meta charset="utf-8">'
        '<meta name="viewport" content="width=device-width, initial-scale=1">'
        "<meta http-equiv=\"Content-Security-Policy\" "
        "content=\"default-src 'none'; style-src 'unsafe-inline'; img-src data:\">"
        f"<title>{esc(title)}</title><style>{CSS}</style></head>"
        f"<body><main>{body}</main></body></html>\n"
    )
