"""`dyadcast schedule`: serve the monthly cycle on the workspace's cron schedule (needs a Prefect server)."""

from __future__ import annotations

import json

import click

from dyadcast.cli.common import with_workspace
from dyadcast.config import ConfigError
from dyadcast.prefect_env import configure_prefect
from dyadcast.workspace import Workspace


def _show(info: dict, ws: Workspace, api_url: str = "http://127.0.0.1:4200/api") -> None:
    click.echo(f"deployment   {info['deployment']}")
    click.echo(f"flow         {info['flow']} ({info['entrypoint']})")
    click.echo(f"schedule     cron \"{info['cron']}\" in time zone {info['timezone']}")
    click.echo(f"parameters   {json.dumps(info['parameters'])}")
    click.echo("             cutoff: the newest month with published flows; as-of: the day of the run")
    click.echo(f"fits run on  {info['runner']}")
    click.echo("next runs")
    for local, utc in zip(info["next_runs"], info["next_runs_utc"], strict=True):
        click.echo(f"  {local}   ({utc} UTC)" if info["timezone"] != "UTC" else f"  {local}")
    click.echo(f"run it now   {info['trigger']}   (with PREFECT_API_URL set)")
    click.echo(f"serve        PREFECT_API_URL={api_url} dyadcast schedule --workspace {ws.root}")


@click.command("schedule")
@with_workspace
@click.option("--name", help="Deployment name (default: dyadcast-<workspace folder name>).")
@click.option("--dask", "dask", metavar="ADDRESS",
              help="Run the fits on Dask: 'local', a scheduler address, or 'off' (default: config dask_address).")
@click.option("--print-only", is_flag=True, help="Show the deployment and its next runs; start nothing.")
@click.option("--json", "as_json", is_flag=True, help="With --print-only: machine-readable output.")
@click.option("--runs", default=3, show_default=True, help="With --print-only: how many next run times to show.")
def schedule_command(
    ws: Workspace, name: str | None, dask: str | None, print_only: bool, as_json: bool, runs: int
) -> None:
    """Serve the monthly cycle on the cron schedule of dyadcast.toml [schedule] (blocks until stopped).

    Needs a running Prefect server (PREFECT_API_URL): the temporary server of `dyadcast run` cannot
    schedule. Trigger a run by hand with `prefect deployment run 'monthly-cycle/<name>'`.
    """
    from flows.runners import RunnerConfigError, describe_runner
    from flows.schedule import ScheduleError, check_server, require_api_url, schedule_spec, spec_as_dict

    try:
        spec = schedule_spec(ws, name, dask)
        info = {**spec_as_dict(spec, runs), "runner": describe_runner(spec.dask_address)}
    except (ConfigError, RunnerConfigError) as exc:
        raise click.ClickException(str(exc)) from exc
    if print_only:
        if as_json:
            click.echo(json.dumps(info, indent=2))
        else:
            _show(info, ws)
        return
    try:
        api_url = require_api_url()
        check_server(api_url)
    except ScheduleError as exc:
        raise click.ClickException(str(exc)) from exc
    _show(info, ws, api_url)
    click.echo(f"serving on {api_url}; Ctrl-C (or SIGTERM) stops serving, the schedule stays registered")
    configure_prefect(ws.prefect_home, quiet=False)
    from flows.schedule import serve_monthly

    serve_monthly(spec)


COMMANDS = [schedule_command]
