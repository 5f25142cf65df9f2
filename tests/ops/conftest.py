"""Fixtures of the operations tests: one Prefect server per session, and a workspace with history loaded."""

from __future__ import annotations

import os
import signal
import subprocess
import time
import urllib.request
from collections.abc import Iterator
from pathlib import Path

import pytest
from ops_support import BIN, CONFIG, HISTORY_END, SCENARIO, free_port


def _healthy(url: str) -> bool:
    try:
        with urllib.request.urlopen(f"{url}/health", timeout=2) as response:
            return response.status == 200
    except OSError:
        return False


@pytest.fixture(scope="session")
def prefect_api(tmp_path_factory: pytest.TempPathFactory) -> Iterator[str]:
    """A real `prefect server start` (about 30 s once) so each CLI subprocess costs 5-7 s, not 20-40 s."""
    if os.environ.get("PREFECT_API_URL"):
        yield os.environ["PREFECT_API_URL"]
        return
    home = tmp_path_factory.mktemp("prefect-home")
    port = free_port()
    url = f"http://127.0.0.1:{port}/api"
    log = open(home / "server.log", "wb")  # noqa: SIM115 - closed below
    env = {**os.environ, "PREFECT_HOME": str(home), "PREFECT_SERVER_ANALYTICS_ENABLED": "false"}
    server = subprocess.Popen(
        [str(BIN / "prefect"), "server", "start", "--host", "127.0.0.1", "--port", str(port), "--analytics-off",
         "--no-ui"], env=env, stdout=log, stderr=subprocess.STDOUT, start_new_session=True,
    )
    try:
        deadline = time.monotonic() + 240
        while not _healthy(url):
            if server.poll() is not None or time.monotonic() > deadline:
                pytest.fail(f"Prefect server did not start: {(home / 'server.log').read_text()[-2000:]}")
            time.sleep(1)
        yield url
    finally:
        os.killpg(server.pid, signal.SIGTERM)
        try:
            server.wait(timeout=30)
        except subprocess.TimeoutExpired:
            os.killpg(server.pid, signal.SIGKILL)
        log.close()


@pytest.fixture(scope="session")
def loaded_template(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """A workspace with the invented history ingested (no Prefect); tests copy it, never change it."""
    from dyadcast.demo.drops import write_history_drop
    from dyadcast.demo.scenario import generate_scenario
    from dyadcast.ingest import ingest_inbox
    from dyadcast.warehouse import open_warehouse
    from dyadcast.workspace import init_workspace

    ws = init_workspace(tmp_path_factory.mktemp("template") / "ws")
    ws.config_path.write_text(CONFIG, encoding="utf-8")
    write_history_drop(generate_scenario(**SCENARIO), HISTORY_END, ws.inbox)
    with open_warehouse(ws.warehouse_path) as con:
        summary = ingest_inbox(ws, con)
    assert summary.ok, summary.to_text()
    return ws.root
