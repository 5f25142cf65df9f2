"""Report content for the Prefect UI, returned as plain values: the flow posts them with
`create_markdown_artifact` / `create_table_artifact` (this package never imports Prefect).
"""

from __future__ import annotations

import math
import re
from datetime import date
from typing import Any

import duckdb
import pandas as pd

from dyadcast.months import format_month
from dyadcast.report import queries
from dyadcast.report.collect import select, shown_model
from dyadcast.report.page import fmt_count, fmt_interval, fmt_month, fmt_pct, fmt_ratio
from dyadcast.report.summary import (
    CAUTION_TEXT,
    CAUTION_TITLE,
    coverage_sentence,
    pick_vintage,
    pooled,
    trust_sentence,
)

_MD_SPECIAL = re.compile(r"([\\`*_{}\[\]|~])")


def md(value: Any) -> str:
    """Markdown-safe text: data (a country label, a file name) cannot add markup, HTML or links."""
    text = str(value).replace("&", "&amp;").replace("<", "&lt;").replace(">", "&gt;")
    return _MD_SPECIAL.sub(r"\\\1", text).replace("\n", " ")


def _clean(value: Any) -> Any:
    """JSON-friendly scalar: NaN -> None, numpy -> Python, dates -> ISO strings."""
    if value is None or (isinstance(value, float) and math.isnan(value)):
        return None
    if isinstance(value, pd.Timestamp | date):
        return value.isoformat()[:10]
    if hasattr(value, "item"):
        value = value.item()
        return None if isinstance(value, float) and math.isnan(value) else value
    return value


def skill_table(con: duckdb.DuckDBPyConnection) -> list[dict[str, Any]]:
    """Per model and horizon (dyads, latest revision): relative WIS/MAE against persistence and coverage."""
    skill = pick_vintage(queries.skill(con))
    cover = pooled(queries.overview(con))
    if skill.empty and cover.empty:
        return []
    keys = ["model", "horizon"]
    skill_cols = [c for c in ("relative_wis", "relative_mae", "n_common") if c in skill.columns]
    left = skill[keys + skill_cols] if not skill.empty else pd.DataFrame(columns=keys + skill_cols)
    right = cover[[*keys, "n", "mae", "mean_wis", "coverage_50", "coverage_90"]]
    merged = left.merge(right, on=keys, how="outer").sort_values(["horizon", "model"])
    return [{k: _clean(v) for k, v in row.items()} for row in merged.to_dict("records")]


def report_summary_markdown(
    con: duckdb.DuckDBPyConnection, cutoff: date | None, primary_model: str | None = None
) -> str:
    """A short Markdown digest of the report: caution, trust sentence, skill, world forecast, warnings."""
    cutoff = cutoff or queries.newest_cutoff(con, primary_model)
    model = shown_model(con, cutoff, primary_model or "")
    lines = [f"# Forecast cycle {format_month(cutoff) if cutoff else '(no cutoff yet)'}", "",
             f"> **{CAUTION_TITLE}.** {CAUTION_TEXT}", "",
             f"**Which model to trust:** {md(trust_sentence(queries.skill(con)))}", ""]
    if model:
        lines += [f"**Ranges:** {md(coverage_sentence(pooled(queries.overview(con)), model))}", ""]
    rows = skill_table(con)
    if rows:
        lines += ["## Skill against persistence (dyads)", "",
                  "| model | months ahead | relative WIS | 90 % coverage | n |", "|---|---:|---:|---:|---:|"]
        lines += [f"| {md(r['model'])} | {r['horizon']} | {fmt_ratio(r.get('relative_wis'))} | "
                  f"{fmt_pct(r.get('coverage_90'))} | {fmt_count(r.get('n'))} |" for r in rows]
        lines.append("")
    world = select(queries.forecast_totals(con, cutoff, model), ("world_total", "*", "*")) if model else pd.DataFrame()
    if not world.empty:
        lines += [f"## World total forecast ({md(model)})", "",
                  "| month | median | 50 % interval | 90 % interval |", "|---|---:|---:|---:|"]
        lines += [f"| {fmt_month(r.target_month)} | {fmt_count(r.q500)} | {fmt_interval(r.q250, r.q750)} | "
                  f"{fmt_interval(r.q050, r.q950)} |" for r in world.sort_values("horizon").itertuples()]
        lines.append("")
    warnings = queries.exceedances(con, model, limit=5) if model else pd.DataFrame()
    if not warnings.empty:
        lines += ["## Exceedances one month ahead", ""]
        lines += [f"- {fmt_month(r.target_month)} {md(r.origin)} → {md(r.destination)}: reported "
                  f"{fmt_count(r.actual)}; forecast median {fmt_count(r.q500)}, top of 90 % range "
                  f"{fmt_count(r.q950)}" for r in warnings.itertuples()]
        lines.append("")
    rejected = queries.quarantined(con, limit=5)
    if not rejected.empty:
        lines += ["## Files in quarantine", ""]
        lines += [f"- {md(r.file_name)}: {md(r.reason)}" for r in rejected.itertuples()]
        lines.append("")
    return "\n".join(lines)
