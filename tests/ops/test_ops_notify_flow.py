"""Notifications from real runs: a rejected file and a failed run reach a webhook on 127.0.0.1, the CLI
exits non-zero, and the failed run is Failed in Prefect."""

from __future__ import annotations

import asyncio
import importlib.util
import json
import subprocess
import threading
from http.server import BaseHTTPRequestHandler, ThreadingHTTPServer
from pathlib import Path

import pytest
from ops_support import BIN, cli_env, copy_workspace

pytestmark = pytest.mark.slow


def _wired() -> bool:
    origin = importlib.util.find_spec("flows.monthly_cycle").origin
    return "notify_on_failure" in Path(origin).read_text(encoding="utf-8")


def _hook() -> tuple[ThreadingHTTPServer, list[dict]]:
    received: list[dict] = []

    class Handler(BaseHTTPRequestHandler):
        def do_POST(self) -> None:  # noqa: N802
            received.append(json.loads(self.rfile.read(int(self.headers["Content-Length"]))))
            self.send_response(200)
            self.end_headers()

        def log_message(self, *args: object) -> None:
            pass

    server = ThreadingHTTPServer(("127.0.0.1", 0), Handler)
    threading.Thread(target=server.serve_forever, kwargs={"poll_interval": 0.05}, daemon=True).start()
    return server, received


async def _failed_runs(api_url: str, workspace: str) -> list[str]:
    from prefect.client.orchestration import PrefectClient

    async with PrefectClient(api_url) as client:
        runs = await client.read_flow_runs(limit=50)
    return [r.state.type.value for r in runs if r.parameters.get("workspace") == workspace]


@pytest.mark.skipif(not _wired(), reason="flows not wired yet (apply the ops diff: webhook notifications)")
def test_rejection_and_failure_are_notified(tmp_path: Path, prefect_api: str, loaded_template: Path) -> None:
    server, received = _hook()
    try:
        root = copy_workspace(loaded_template, tmp_path / "ws")
        env = {**cli_env(prefect_api, tmp_path / "home"),
               "DYADCAST_WEBHOOK_URL": f"http://127.0.0.1:{server.server_port}/hook"}
        (root / "inbox" / "flows_bad.csv").write_text("origin;destination;month;arrivals\nQMA;XAB;2023-06;5\n")
        rejected = subprocess.run([str(BIN / "dyadcast"), "run", "-w", str(root), "--cutoff", "2023-05"],
                                  env=env, capture_output=True, text=True, timeout=600)
        assert rejected.returncode == 1, rejected.stdout + rejected.stderr
        assert "rejected" in rejected.stderr
        (message,) = received
        assert message["event"] == "files_rejected" and message["cutoff"] == "2023-05"
        assert [r["file"] for r in message["rejected"]] == ["flows_bad.csv"] and message["rejected"][0]["reason"]
        assert (root / "quarantine" / "flows_bad.csv").exists()

        failed = subprocess.run([str(BIN / "dyadcast"), "run", "-w", str(root), "--cutoff", "2019-01"],
                                env=env, capture_output=True, text=True, timeout=600)
        assert failed.returncode == 1, failed.stdout + failed.stderr
        assert received[-1]["event"] == "run_failed" and received[-1]["cutoff"] == "2019-01"
        assert "2019-01" in received[-1]["message"]
        states = asyncio.run(_failed_runs(prefect_api, str(root)))
        assert sorted(states) == ["COMPLETED", "FAILED"]
    finally:
        server.shutdown()
        server.server_close()
