"""Serve the monthly cycle as a Prefect deployment on the workspace's cron schedule.

Prefect's temporary (ephemeral) server runs no scheduler, so serving needs a running
`prefect server start` named by PREFECT_API_URL. Everything up to `serve_monthly` is plain Python
(no Prefect import), so `dyadcast schedule --print-only` answers in a fraction of a second.
"""

from __future__ import annotations

import json
import os
import re
import urllib.error
import urllib.request
from dataclasses import dataclass, field
from datetime import UTC, datetime
from typing import Any
from zoneinfo import ZoneInfo, ZoneInfoNotFoundError

from cronsim import CronSim, CronSimError

from dyadcast.config import ConfigError
from dyadcast.workspace import Workspace
from flows.runners import resolve_dask_address

FLOW_NAME = "monthly-cycle"  # the name in flows.monthly_cycle's @flow decorator
FLOW_ENTRYPOINT = "flows.monthly_cycle:monthly_cycle"


class ScheduleError(RuntimeError):
    """Serving cannot start; the message says what to start or set."""


@dataclass(frozen=True)
class ScheduleSpec:
    deployment: str
    cron: str
    timezone: str
    parameters: dict[str, Any]
    dask_address: str | None = None
    tags: tuple[str, ...] = field(default=("dyadcast", "monthly"))

    @property
    def full_name(self) -> str:
        return f"{FLOW_NAME}/{self.deployment}"

    @property
    def trigger_command(self) -> str:
        return f"prefect deployment run '{self.full_name}'"


def deployment_name(ws: Workspace) -> str:
    """One deployment per workspace, named after its folder, so two workspaces can share a server."""
    slug = re.sub(r"[^a-z0-9]+", "-", ws.root.name.lower()).strip("-") or "workspace"
    return f"dyadcast-{slug}"


def check_schedule(cron: str, timezone: str, where: str = "dyadcast.toml [schedule]") -> ZoneInfo:
    """Validate both values with messages that say which key to fix; returns the time zone."""
    try:
        zone = ZoneInfo(timezone)
    except (ZoneInfoNotFoundError, ValueError) as exc:
        raise ConfigError(
            f"{where}: timezone = {timezone!r} is not an IANA time-zone name; use e.g. \"UTC\" or the "
            "Area/City name of your office (see `python -c 'import zoneinfo; print(zoneinfo.available_timezones())'`)"
        ) from exc
    fields = cron.split()
    if len(fields) != 5:
        raise ConfigError(
            f"{where}: cron = {cron!r} has {len(fields)} field(s); use 5: minute hour day-of-month month "
            "day-of-week, e.g. \"0 6 5 * *\" for 06:00 on the 5th of every month"
        )
    try:
        CronSim(cron, datetime.now(zone))
    except CronSimError as exc:
        raise ConfigError(f"{where}: cron = {cron!r} is not valid ({exc}); e.g. \"0 6 5 * *\"") from exc
    return zone


def next_run_times(cron: str, timezone: str, count: int = 3, after: datetime | None = None) -> list[datetime]:
    """The next `count` run times strictly after `after` (default now), as aware datetimes in `timezone`."""
    zone = check_schedule(cron, timezone)
    start = (after or datetime.now(UTC)).astimezone(zone)
    times = CronSim(cron, start)
    return [next(times) for _ in range(count)]


def schedule_spec(ws: Workspace, name: str | None = None, dask_address: str | None = None) -> ScheduleSpec:
    """The deployment this workspace gets: cron and time zone from config, cutoff left to the flow."""
    config = ws.config()
    check_schedule(config.schedule.cron, config.schedule.timezone, f"{ws.config_path} [schedule]")
    return ScheduleSpec(
        deployment=name or deployment_name(ws),
        cron=config.schedule.cron,
        timezone=config.schedule.timezone,
        # no cutoff: the flow takes the newest month with published flows (cycle.newest_cutoff)
        parameters={"workspace": str(ws.root)},
        dask_address=resolve_dask_address(dask_address, config.dask_address),
    )


def spec_as_dict(spec: ScheduleSpec, runs: int = 3, after: datetime | None = None) -> dict[str, Any]:
    times = next_run_times(spec.cron, spec.timezone, runs, after)
    return {
        "deployment": spec.full_name,
        "flow": FLOW_NAME,
        "entrypoint": FLOW_ENTRYPOINT,
        "cron": spec.cron,
        "timezone": spec.timezone,
        "parameters": spec.parameters,
        "dask_address": spec.dask_address,
        "tags": list(spec.tags),
        "next_runs": [t.isoformat() for t in times],
        "next_runs_utc": [t.astimezone(UTC).isoformat() for t in times],
        "trigger": spec.trigger_command,
    }


def require_api_url(env: dict[str, str] | None = None) -> str:
    """PREFECT_API_URL of a running server; without one, say how to start it."""
    url = (env if env is not None else os.environ).get("PREFECT_API_URL", "").strip()
    if not url:
        raise ScheduleError(
            "PREFECT_API_URL is not set. Scheduling needs a running Prefect server: the temporary server "
            "that `dyadcast run` starts has no scheduler. Start one (e.g. `prefect server start "
            "--analytics-off` in another terminal, or `docker compose up -d prefect-server`), then "
            "`export PREFECT_API_URL=http://127.0.0.1:4200/api` and run `dyadcast schedule` again. "
            "Use --print-only to see the deployment without a server."
        )
    return url.rstrip("/")


def check_server(api_url: str, timeout_s: float = 5.0) -> None:
    """Fail fast with a clear message instead of Prefect's retries against a dead address."""
    try:
        with urllib.request.urlopen(f"{api_url}/health", timeout=timeout_s) as response:  # noqa: S310
            if response.status == 200:
                return
            problem = f"HTTP {response.status}"
    except urllib.error.HTTPError as exc:
        problem = f"HTTP {exc.code}"
    except (urllib.error.URLError, OSError, ValueError) as exc:
        problem = f"{type(exc).__name__}: {getattr(exc, 'reason', exc)}"
    raise ScheduleError(
        f"no Prefect server answers at {api_url}/health ({problem}). Start it (`prefect server start`, or "
        "`docker compose up -d prefect-server`) or correct PREFECT_API_URL (it ends in /api)."
    )


def serve_monthly(spec: ScheduleSpec) -> None:
    """Register the deployment and poll for its runs until stopped (blocks; Ctrl-C or SIGTERM ends it).

    `pause_on_shutdown=False` keeps the schedule active while this process is down (e.g. a restart),
    so a run that fell due meanwhile is marked Late on the server and started when serving resumes.
    `limit=1`: one run at a time per server process; the workspace run lock guards the rest.
    """
    from prefect.schedules import Cron
    from prefect.types.entrypoint import EntrypointType

    from flows.monthly_cycle import monthly_cycle
    from flows.runners import make_task_runner

    flow = monthly_cycle
    if spec.dask_address:
        flow = monthly_cycle.with_options(task_runner=make_task_runner(spec.dask_address))
    flow.serve(
        name=spec.deployment,
        schedules=[Cron(spec.cron, timezone=spec.timezone)],
        parameters=spec.parameters,
        tags=list(spec.tags),
        description="dyadcast monthly cycle: ingest, features, models, snapshots, scoring, report",
        pause_on_shutdown=False,
        limit=1,
        print_starting_message=False,
        entrypoint_type=EntrypointType.MODULE_PATH,  # flows.monthly_cycle.monthly_cycle, from any folder
    )


def spec_json(spec: ScheduleSpec, runs: int = 3, after: datetime | None = None) -> str:
    return json.dumps(spec_as_dict(spec, runs, after), indent=2)
