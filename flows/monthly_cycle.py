"""The monthly cycle: ingest → features → fit → forecast → snapshot → score → report."""

from __future__ import annotations

from datetime import date
from typing import Any

from prefect import flow

from dyadcast import cycle
from dyadcast.models.mle import one_line_fallbacks
from dyadcast.months import format_month, parse_month
from dyadcast.notify import notify, notify_on_failure, webhook_url
from dyadcast.runlock import run_lock
from dyadcast.warehouse import open_warehouse
from dyadcast.workspace import open_workspace
from flows.steps import (
    forecast_cutoff,
    ingest_step,
    post_ingest_summary,
    recover_step,
    report_step,
    say,
    score_step,
)


@flow(name="monthly-cycle", log_prints=False)
def monthly_cycle(
    workspace: str,
    cutoff: str | None = None,
    as_of: str | None = None,
    models: list[str] | None = None,
    ingest: bool = True,
    mode: str | None = None,
) -> dict[str, Any]:
    """One monthly run. Without a cutoff, the newest month with published flows; without as-of, today."""
    one_line_fallbacks()
    ws = open_workspace(workspace)
    config = ws.config()
    hook = webhook_url(config.webhook_url)
    with (
        run_lock(ws.lock_path, "monthly-cycle"),
        notify_on_failure(hook, str(ws.root), cutoff, "monthly cycle") as notice,
        open_warehouse(ws.warehouse_path) as con,
    ):
        recover_step(con, ws)
        summary = ingest_step(ws, con) if ingest else None
        post_ingest_summary(summary)
        month = parse_month(cutoff) if cutoff else cycle.newest_cutoff(con)
        notice.cutoff = format_month(month)
        as_of_date = date.fromisoformat(as_of) if as_of else date.today()
        names = cycle.models_to_run(config, models)
        say(f"cycle {format_month(month)} (as of {as_of_date}): models {', '.join(names)}")
        refs = forecast_cutoff(con, ws, config, month, as_of_date, "monthly", names, mode)
        scored = score_step(con, ws)
        report = report_step(con, ws, month)
    if summary is not None and not summary.ok:
        notify(hook, "files_rejected", workspace=str(ws.root), cutoff=format_month(month),
               message=f"{len(summary.rejected)} file(s) rejected; forecasts were made from the accepted data",
               rejected=summary.rejected)
    return {
        "cutoff": format_month(month),
        "as_of": as_of_date.isoformat(),
        "snapshots": [str(r.path) for r in refs],
        "ingest_ok": getattr(summary, "ok", True),
        "ingest": summary,
        "scored": scored,
        "report": str(report),
    }
