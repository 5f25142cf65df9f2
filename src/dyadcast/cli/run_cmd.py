"""`dyadcast run` and `dyadcast backtest`: start the Prefect flows (imported only here, lazily)."""

from __future__ import annotations

import sys

import click

from dyadcast.cli.common import with_workspace
from dyadcast.months import parse_month
from dyadcast.prefect_env import configure_prefect
from dyadcast.workspace import Workspace


def _month(_ctx: click.Context, _param: click.Parameter, value: str | None) -> str | None:
    if value is None:
        return None
    try:
        parse_month(value)
    except ValueError as exc:
        raise click.BadParameter(str(exc)) from exc
    return value


@click.command("run")
@with_workspace
@click.option("--cutoff", callback=_month, help="Last month whose arrivals are used (YYYY-MM). Default: newest.")
@click.option("--as-of", "as_of", help="Use only data published on or before this date (YYYY-MM-DD). Default: today.")
@click.option("--models", help="Comma-separated model names (default: the configuration's list).")
@click.option("--no-ingest", is_flag=True, help="Skip the inbox (forecast from what is loaded).")
@click.option("--mode", type=click.Choice(["refresh", "fit"]), default=None,
              help="refresh: reuse stored hyper-parameters; fit: also re-tune (default: monthly_mode in the config).")
def run_command(
    ws: Workspace, cutoff: str | None, as_of: str | None, models: str | None, no_ingest: bool, mode: str | None
) -> None:
    """Run the monthly cycle: ingest, features, models, snapshots, scoring, report."""
    configure_prefect(ws.prefect_home)
    from flows.monthly_cycle import monthly_cycle

    result = monthly_cycle(
        workspace=str(ws.root), cutoff=cutoff, as_of=as_of,
        models=models.split(",") if models else None, ingest=not no_ingest, mode=mode,
    )
    click.echo(f"cutoff {result['cutoff']}: {len(result['snapshots'])} snapshots written; report {result['report']}")
    if not result["ingest_ok"]:
        click.echo("some files were rejected: see the quarantine folder", err=True)
        sys.exit(1)


@click.command("backtest")
@with_workspace
@click.option("--from", "start", required=True, callback=_month, help="First cutoff (YYYY-MM).")
@click.option("--to", "end", required=True, callback=_month, help="Last cutoff (YYYY-MM).")
@click.option("--models", help="Comma-separated model names (default: the configuration's list).")
def backtest_command(ws: Workspace, start: str, end: str, models: str | None) -> None:
    """Replay past cutoffs with the data published at each, write backtest snapshots and score them."""
    if parse_month(start) > parse_month(end):
        raise click.BadParameter(f"--from {start} is after --to {end}")
    configure_prefect(ws.prefect_home)
    from flows.backtest import backtest

    result = backtest(workspace=str(ws.root), start=start, end=end, models=models.split(",") if models else None)
    click.echo(f"backtest {start}..{end}: {result['snapshots']} snapshots; report {result['report']}")


COMMANDS = [run_command, backtest_command]
