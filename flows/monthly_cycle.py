"""The monthly cycle: ingest → features → fit → forecast → snapshot → score → report."""

from __future__ import annotations

from datetime import date
from typing import Any

from prefect import flow

from dyadcast import cycle
from dyadcast.months import format_month, parse_month
from dyadcast.warehouse import open_warehouse
from dyadcast.workspace import open_workspace
from flows.steps import forecast_cutoff, ingest_step, post_ingest_summary, report_step, say, score_step


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
    ws = open_workspace(workspace)
    config = ws.config()
    with open_warehouse(ws.warehouse_path) as con:
        summary = ingest_step(ws, con) if ingest else None
        post_ingest_summary(summary)
        month = parse_month(cutoff) if cutoff else cycle.newest_cutoff(con)
        as_of_date = date.fromisoformat(as_of) if as_of else date.today()
        names = cycle.models_to_run(config, models)
        say(f"cycle {format_month(month)} (as of {as_of_date}): models {', '.join(names)}")
        refs = forecast_cutoff(con, ws, config, month, as_of_date, "monthly", names, mode)
        scored = score_step(con, ws)
        report = report_step(con, ws, month)
    return {
        "cutoff": format_month(month),
        "as_of": as_of_date.isoformat(),
        "snapshots": [str(r.path) for r in refs],
        "ingest_ok": getattr(summary, "ok", True),
        "ingest": summary,
        "scored": scored,
        "report": str(report),
    }
