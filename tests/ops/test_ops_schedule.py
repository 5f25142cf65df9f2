"""`dyadcast schedule`: the deployment it would serve, its next run times, and its refusal without a server."""

from __future__ import annotations

import asyncio
import json
import socket
import threading
from datetime import UTC, datetime
from http.server import BaseHTTPRequestHandler, HTTPServer
from pathlib import Path

import pytest
from click.testing import CliRunner

from dyadcast.cli import main
from dyadcast.config import ConfigError
from dyadcast.workspace import init_workspace
from flows.schedule import ScheduleError, check_schedule, check_server, next_run_times, require_api_url


def _workspace(tmp_path: Path, schedule: str = "", extra: str = "") -> Path:
    ws = init_workspace(tmp_path / "Ops WS")
    if schedule or extra:
        ws.config_path.write_text(f"{extra}\n[schedule]\n{schedule}\n", encoding="utf-8")
    return ws.root


def test_print_only_shows_the_default_deployment(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.delenv("DYADCAST_DASK_ADDRESS", raising=False)
    root = _workspace(tmp_path)
    result = CliRunner().invoke(main, ["schedule", "-w", str(root), "--print-only", "--json"])
    assert result.exit_code == 0, result.output
    info = json.loads(result.output)
    assert info["deployment"] == "monthly-cycle/dyadcast-ops-ws"
    assert info["cron"] == "0 6 5 * *" and info["timezone"] == "UTC"  # default: the 5th at 06:00 UTC
    assert info["parameters"] == {"workspace": str(root.resolve())}  # no cutoff: the newest month is used
    assert info["trigger"] == "prefect deployment run 'monthly-cycle/dyadcast-ops-ws'"
    assert len(info["next_runs"]) == 3 and info["dask_address"] is None
    for text in info["next_runs_utc"]:
        when = datetime.fromisoformat(text)
        assert (when.day, when.hour, when.minute) == (5, 6, 0) and when > datetime.now(UTC)
    human = CliRunner().invoke(main, ["schedule", "-w", str(root), "--print-only"])
    assert human.exit_code == 0 and "prefect deployment run 'monthly-cycle/dyadcast-ops-ws'" in human.output


def test_print_only_uses_the_configured_cron_zone_and_dask(tmp_path: Path) -> None:
    root = _workspace(tmp_path, 'cron = "30 7 2 * *"\ntimezone = "EST5EDT"', 'dask_address = "local"')
    result = CliRunner().invoke(main, ["schedule", "-w", str(root), "--print-only", "--json", "--runs", "5",
                                       "--name", "nightly"])
    info = json.loads(result.output)
    assert info["deployment"] == "monthly-cycle/nightly" and info["dask_address"] == "local"
    assert len(info["next_runs"]) == 5
    assert all(datetime.fromisoformat(t).strftime("%d %H:%M") == "02 07:30" for t in info["next_runs"])
    off = CliRunner().invoke(main, ["schedule", "-w", str(root), "--print-only", "--json", "--dask", "off"])
    assert json.loads(off.output)["dask_address"] is None


@pytest.mark.parametrize(("cron", "zone"), [("0 6 5 * *", "UTC"), ("0 6 2 * *", "CET"),
                                            ("15 1 * * 0", "EST5EDT"), ("0 2 31 * *", "CET")])
def test_next_runs_match_prefects_own_scheduler(cron: str, zone: str) -> None:
    # Reference: Prefect's server-side CronSchedule (prefect.server.schemas.schedules), which creates the
    # runs the scheduler hands out; our print-only preview uses cronsim and must agree with it, DST included.
    from prefect.server.schemas.schedules import CronSchedule

    after = datetime(2026, 2, 20, 12, 34, tzinfo=UTC)
    ours = next_run_times(cron, zone, 8, after)
    theirs = asyncio.run(CronSchedule(cron=cron, timezone=zone).get_dates(n=8, start=after))
    assert [t.astimezone(UTC) for t in ours] == [t.astimezone(UTC) for t in theirs]


def test_known_dates_for_the_default() -> None:
    # worked by hand: the 5th of each month at 06:00 UTC, strictly after 2026-03-05 06:00
    runs = next_run_times("0 6 5 * *", "UTC", 3, datetime(2026, 3, 5, 6, 0, tzinfo=UTC))
    assert [t.isoformat() for t in runs] == ["2026-04-05T06:00:00+00:00", "2026-05-05T06:00:00+00:00",
                                             "2026-06-05T06:00:00+00:00"]


@pytest.mark.parametrize(("schedule", "expected"), [
    ('cron = "0 6 5 *"', "has 4 field"),
    ('cron = "0 25 5 * *"', "is not valid"),
    ('timezone = "Mars/Olympus"', "not an IANA time-zone name"),
])
def test_bad_schedule_names_the_key(tmp_path: Path, schedule: str, expected: str) -> None:
    root = _workspace(tmp_path, schedule)
    result = CliRunner().invoke(main, ["schedule", "-w", str(root), "--print-only"])
    assert result.exit_code == 1 and expected in result.output and "[schedule]" in result.output
    with pytest.raises(ConfigError):
        check_schedule("0 6 5 * * *", "UTC")


def test_serving_requires_a_server(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.delenv("PREFECT_API_URL", raising=False)
    root = _workspace(tmp_path)
    result = CliRunner().invoke(main, ["schedule", "-w", str(root)])
    assert result.exit_code == 1
    assert "PREFECT_API_URL is not set" in result.output and "prefect server start" in result.output
    assert require_api_url({"PREFECT_API_URL": "http://127.0.0.1:4200/api/"}) == "http://127.0.0.1:4200/api"


def test_server_check_passes_on_health_and_explains_a_dead_address() -> None:
    class Health(BaseHTTPRequestHandler):
        def do_GET(self) -> None:  # noqa: N802
            self.send_response(200 if self.path == "/api/health" else 404)
            self.end_headers()
            self.wfile.write(b"true")

        def log_message(self, *args: object) -> None:
            pass

    server = HTTPServer(("127.0.0.1", 0), Health)
    threading.Thread(target=server.serve_forever, kwargs={"poll_interval": 0.05}, daemon=True).start()
    try:
        check_server(f"http://127.0.0.1:{server.server_port}/api")
        with pytest.raises(ScheduleError, match="HTTP 404"):
            check_server(f"http://127.0.0.1:{server.server_port}/wrong")
    finally:
        server.shutdown()
        server.server_close()
    with socket.socket() as probe:
        probe.bind(("127.0.0.1", 0))
        port = probe.getsockname()[1]
    with pytest.raises(ScheduleError, match="no Prefect server answers"):
        check_server(f"http://127.0.0.1:{port}/api", timeout_s=2)
