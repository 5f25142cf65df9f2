"""`dyadcast sql`: query the warehouse read-only and print a table or CSV."""

from __future__ import annotations

from pathlib import Path

import click

from dyadcast.cli.common import with_workspace
from dyadcast.report.analyst import QueryRefused, format_csv, format_table, run_query
from dyadcast.workspace import Workspace


@click.command("sql", context_settings={"ignore_unknown_options": True})  # a query may start with "--"
@click.argument("query", required=False)
@click.option("--file", "-f", "query_file", type=click.Path(exists=True, dir_okay=False),
              help="Run the query in this file (e.g. one of sql/queries/*.sql) instead of QUERY.")
@click.option("--csv", "as_csv", is_flag=True, help="Print CSV instead of an aligned table.")
@with_workspace
def sql_command(ws: Workspace, query: str | None, query_file: str | None, as_csv: bool) -> None:
    """Run QUERY (SELECT …) on the warehouse, read-only. Views: forecasts_all, forecasts_latest,
    actuals_first_release, actuals_latest, actuals_totals, accuracy_log, accuracy_overview,
    skill_vs_persistence, exceedances, data_freshness, quarantined_files."""
    if bool(query) == bool(query_file):
        raise click.UsageError("give either a QUERY argument or --file PATH (not both)")
    text = Path(query_file).read_text(encoding="utf-8") if query_file else query
    try:
        frame = run_query(ws.warehouse_path, text)
    except QueryRefused as exc:
        raise click.ClickException(str(exc)) from exc
    click.echo(format_csv(frame) if as_csv else format_table(frame), nl=not as_csv)


COMMANDS = [sql_command]
