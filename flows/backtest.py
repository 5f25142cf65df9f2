"""Backtest: replay past cutoffs, each with exactly the data that was published by then, then score."""

from __future__ import annotations

from typing import Any

from prefect import flow

from dyadcast import cycle
from dyadcast.months import format_month, month_range, parse_month
from dyadcast.warehouse import open_warehouse
from dyadcast.workspace import open_workspace
from flows.steps import forecast_cutoff, report_step, say, score_step


@flow(name="backtest", log_prints=False)
def backtest(workspace: str, start: str, end: str, models: list[str] | None = None,
             mode: str | None = None) -> dict[str, Any]:
    ws = open_workspace(workspace)
    config = ws.config()
    months = month_range(parse_month(start), parse_month(end))
    names = cycle.models_to_run(config, models)
    refs = []
    with open_warehouse(ws.warehouse_path) as con:
        for number, month in enumerate(months, 1):
            as_of = cycle.first_publication(con, month)
            say(f"backtest cutoff {format_month(month)} ({number}/{len(months)}), as of {as_of}")
            refs += forecast_cutoff(con, ws, config, month, as_of, "backtest", names, mode)
        scored = score_step(con, ws)
        report = report_step(con, ws, months[-1])
    return {"cutoffs": [format_month(m) for m in months], "snapshots": len(refs), "scored": scored,
            "report": str(report)}
