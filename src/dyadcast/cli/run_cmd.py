"""`dyadcast run` and `dyadcast backtest`: start the Prefect flows (imported only here, lazily)."""

from __future__ import annotations

import sys
from typing import Any

import click

from dyadcast.cli.common import with_workspace
from dyadcast.months import parse_month
from dyadcast.prefect_env import configure_prefect
from dyadcast.runlock import BUSY_EXIT_CODE, RunLockedError, run_lock
from dyadcast.workspace import Workspace

dask_option = click.option(
    "--dask", "dask", metavar="ADDRESS",
    help="Run the model fits on Dask: 'local' (a cluster on this machine), a scheduler address such as "
         "tcp://10.0.0.5:8786, or 'off'. Default: config dask_address, else in-process threads.")


def _month(_ctx: click.Context, _param: click.Parameter, value: str | None) -> str | None:
    if value is None:
        return None
    try:
        parse_month(value)
    except ValueError as exc:
        raise click.BadParameter(str(exc)) from exc
    return value


def _with_runner(flow: Any, ws: Workspace, dask: str | None) -> Any:
    from flows.runners import RunnerConfigError, describe_runner, make_task_runner, resolve_dask_address

    try:
        address = resolve_dask_address(dask, ws.config().dask_address)
    except RunnerConfigError as exc:
        raise click.BadParameter(str(exc), param_hint="--dask") from exc
    if address is None:
        return flow
    click.echo(f"model fits run on {describe_runner(address)}")
    return flow.with_options(task_runner=make_task_runner(address))


def _busy(exc: RunLockedError) -> None:
    click.echo(f"Error: {exc}", err=True)
    sys.exit(BUSY_EXIT_CODE)


def _failed(exc: Exception) -> click.ClickException:
    return click.ClickException(
        f"the run failed: {type(exc).__name__}: {exc} (traceback above; the Prefect run is marked Failed)")


@click.command("run")
@with_workspace
@click.option("--cutoff", callback=_month, help="Last month whose arrivals are used (YYYY-MM). Default: newest.")
@click.option("--as-of", "as_of", help="Use only data published on or before this date (YYYY-MM-DD). Default: today.")
@click.option("--models", help="Comma-separated model names (default: the configuration's list).")
@click.option("--no-ingest", is_flag=True, help="Skip the inbox (forecast from what is loaded).")
@click.option("--mode", type=click.Choice(["refresh", "fit"]), default=None,
              help="refresh: reuse stored hyper-parameters; fit: also re-tune (default: monthly_mode in the config).")
@dask_option
def run_command(
    ws: Workspace, cutoff: str | None, as_of: str | None, models: str | None, no_ingest: bool, mode: str | None,
    dask: str | None,
) -> None:
    """Run the monthly cycle: ingest, features, models, snapshots, scoring, report."""
    try:
        with run_lock(ws.lock_path, "dyadcast run"):  # refuse now, not after Prefect's 30 s start
            configure_prefect(ws.prefect_home)
            from flows.monthly_cycle import monthly_cycle

            result = _with_runner(monthly_cycle, ws, dask)(
                workspace=str(ws.root), cutoff=cutoff, as_of=as_of,
                models=models.split(",") if models else None, ingest=not no_ingest, mode=mode,
            )
    except RunLockedError as exc:
        _busy(exc)
    except click.ClickException:
        raise
    except Exception as exc:  # Prefect has logged the traceback; one clear line and exit status 1
        raise _failed(exc) from exc
    click.echo(f"cutoff {result['cutoff']}: {len(result['snapshots'])} snapshots written; report {result['report']}")
    if not result["ingest_ok"]:
        click.echo("some files were rejected: see the quarantine folder", err=True)
        sys.exit(1)


@click.command("backtest")
@with_workspace
@click.option("--from", "start", required=True, callback=_month, help="First cutoff (YYYY-MM).")
@click.option("--to", "end", required=True, callback=_month, help="Last cutoff (YYYY-MM).")
@click.option("--models", help="Comma-separated model names (default: the configuration's list).")
@dask_option
def backtest_command(ws: Workspace, start: str, end: str, models: str | None, dask: str | None) -> None:
    """Replay past cutoffs with the data published at each, write backtest snapshots and score them."""
    if parse_month(start) > parse_month(end):
        raise click.BadParameter(f"--from {start} is after --to {end}")
    try:
        with run_lock(ws.lock_path, "dyadcast backtest"):
            configure_prefect(ws.prefect_home)
            from flows.backtest import backtest

            result = _with_runner(backtest, ws, dask)(
                workspace=str(ws.root), start=start, end=end, models=models.split(",") if models else None
            )
    except RunLockedError as exc:
        _busy(exc)
    except click.ClickException:
        raise
    except Exception as exc:
        raise _failed(exc) from exc
    click.echo(f"backtest {start}..{end}: {result['snapshots']} snapshots; report {result['report']}")


COMMANDS = [run_command, backtest_command]
