"""`dyadcast report`: rebuild the manager's accuracy report from the warehouse."""

from __future__ import annotations

import click
import duckdb

from dyadcast.cli.common import with_workspace
from dyadcast.months import parse_month
from dyadcast.warehouse import open_warehouse
from dyadcast.workspace import Workspace


@click.command("report")
@click.option("--cutoff", default=None, metavar="YYYY-MM",
              help="Cutoff whose forecast the report shows (default: the newest with a forecast).")
@click.option("--summary", is_flag=True, help="Also print the short Markdown digest.")
@with_workspace
def report_command(ws: Workspace, cutoff: str | None, summary: bool) -> None:
    """Write reports/accuracy.html (and a dated copy for the cutoff); works offline."""
    try:
        month = parse_month(cutoff) if cutoff else None
    except ValueError as exc:
        raise click.BadParameter(str(exc), param_hint="--cutoff") from exc
    try:
        with open_warehouse(ws.warehouse_path) as con:
            from dyadcast.report import build_report, report_summary_markdown  # matplotlib: import when used

            path = build_report(con, ws, month)
            digest = report_summary_markdown(con, month, ws.config().primary_model) if summary else ""
    except duckdb.IOException as exc:
        raise click.ClickException(
            f"cannot open the warehouse {ws.warehouse_path}: {exc}. If a run is in progress, retry when it ends."
        ) from exc
    click.echo(f"report written: {path}")
    if digest:
        click.echo(digest)


COMMANDS = [report_command]
