"""Backtest: replay past cutoffs, each with exactly the data that was published by then, then score."""

from __future__ import annotations

from typing import Any

from prefect import flow

from dyadcast import cycle
from dyadcast.models.mle import one_line_fallbacks
from dyadcast.months import format_month, month_range, parse_month
from dyadcast.notify import notify_on_failure, webhook_url
from dyadcast.runlock import run_lock
from dyadcast.warehouse import open_warehouse
from dyadcast.workspace import open_workspace
from flows.steps import forecast_cutoffs, recover_step, report_step, score_step


@flow(name="backtest", log_prints=False)
def backtest(workspace: str, start: str, end: str, models: list[str] | None = None,
             mode: str | None = None) -> dict[str, Any]:
    one_line_fallbacks()
    ws = open_workspace(workspace)
    config = ws.config()
    months = month_range(parse_month(start), parse_month(end))
    names = cycle.models_to_run(config, models)
    with (
        run_lock(ws.lock_path, "backtest"),
        notify_on_failure(webhook_url(config.webhook_url), str(ws.root), f"{start}..{end}", "backtest"),
        open_warehouse(ws.warehouse_path) as con,
    ):
        recover_step(con, ws)
        # cutoffs overlap: features here one by one, the fits of several cutoffs at once on the task runner
        refs = forecast_cutoffs(con, ws, config, months, lambda m: cycle.first_publication(con, m),
                                "backtest", names, mode)
        scored = score_step(con, ws)
        report = report_step(con, ws, months[-1])
    return {"cutoffs": [format_month(m) for m in months], "snapshots": len(refs), "scored": scored,
            "report": str(report)}
