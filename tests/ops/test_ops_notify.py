"""Webhook notifications against a real HTTP server on 127.0.0.1: delivered when up, harmless when not."""

from __future__ import annotations

import json
import socket
import threading
import time
from collections.abc import Iterator
from dataclasses import dataclass
from http.server import BaseHTTPRequestHandler, ThreadingHTTPServer
from pathlib import Path

import pytest

from dyadcast.notify import (
    build_message,
    notify,
    notify_on_failure,
    post_json,
    redact,
    rejected_entries,
    webhook_url,
)


class Hook:
    """A local endpoint that records what it receives and answers with a chosen status after a delay."""

    def __init__(self) -> None:
        self.received: list[dict] = []
        self.headers: list[dict] = []
        self.status = 204
        self.delay_s = 0.0
        hook = self

        class Handler(BaseHTTPRequestHandler):
            def do_POST(self) -> None:  # noqa: N802 - http.server's naming
                body = self.rfile.read(int(self.headers["Content-Length"]))
                hook.received.append(json.loads(body))
                hook.headers.append(dict(self.headers))
                time.sleep(hook.delay_s)
                self.send_response(hook.status)
                self.end_headers()

            def log_message(self, *args: object) -> None:
                pass

        self.server = ThreadingHTTPServer(("127.0.0.1", 0), Handler)
        self.server.daemon_threads = True  # do not wait for a deliberately slow answer at close
        self.url = f"http://127.0.0.1:{self.server.server_port}/hooks/secret-token-123"
        threading.Thread(target=self.server.serve_forever, kwargs={"poll_interval": 0.05}, daemon=True).start()

    def close(self) -> None:
        self.server.shutdown()
        self.server.server_close()


@pytest.fixture
def hook() -> Iterator[Hook]:
    h = Hook()
    yield h
    h.close()


@dataclass
class Rejected:  # the shape of IngestSummary.rejected items: file, one-line reason, report path
    file: str
    reason: str
    report: Path


def test_rejection_message_is_delivered(hook: Hook) -> None:
    logs: list[str] = []
    rejected = [Rejected("flows_2026-10.csv", "column 'arivals' is not expected", Path("/q/flows.rejected.txt"))]
    delivery = notify(hook.url, "files_rejected", workspace="/data/ws", cutoff="2026-10",
                      message="1 file rejected", rejected=rejected, log=logs.append)
    assert delivery.sent and delivery.detail == "HTTP 204" and logs == []
    (body,) = hook.received
    assert body["event"] == "files_rejected" and body["workspace"] == "/data/ws" and body["cutoff"] == "2026-10"
    assert body["message"] == "1 file rejected"
    assert body["rejected"] == [{"file": "flows_2026-10.csv", "reason": "column 'arivals' is not expected",
                                 "report": "/q/flows.rejected.txt"}]
    assert "flows_2026-10.csv" in body["text"]
    assert hook.headers[0]["Content-Type"] == "application/json"


def test_error_status_is_logged_not_raised(hook: Hook) -> None:
    hook.status = 500
    logs: list[str] = []
    delivery = notify(hook.url, "run_failed", workspace="w", cutoff=None, message="boom", log=logs.append)
    assert not delivery.sent and delivery.detail.startswith("HTTP 500")
    (line,) = logs
    assert "not notified of run_failed" in line and "the run itself is unaffected" in line
    assert "secret-token-123" not in line, "the webhook path is a secret and must not be logged"


def test_endpoint_down_returns_quickly() -> None:
    with socket.socket() as probe:  # a port nobody listens on
        probe.bind(("127.0.0.1", 0))
        port = probe.getsockname()[1]
    logs: list[str] = []
    started = time.monotonic()
    delivery = notify(f"http://127.0.0.1:{port}/x", "run_failed", workspace="w", cutoff="2026-01",
                      message="m", log=logs.append)
    assert not delivery.sent and time.monotonic() - started < 5 and len(logs) == 1


def test_slow_endpoint_is_cut_off_by_the_timeout(hook: Hook) -> None:
    hook.delay_s = 2.0
    started = time.monotonic()
    delivery = notify(hook.url, "run_failed", workspace="w", cutoff=None, message="m", timeout_s=0.5,
                      log=lambda _m: None)
    assert not delivery.sent and time.monotonic() - started < 1.8


def test_only_http_urls_are_used(tmp_path: Path) -> None:
    secret = tmp_path / "secret.txt"
    secret.write_text("x")
    delivery = post_json(f"file://{secret}", {"event": "run_failed"})
    assert not delivery.sent and "http://" in delivery.detail
    assert not notify("", "run_failed", workspace="w", cutoff=None, message="m").sent  # not configured


def test_failure_context_posts_and_reraises(hook: Hook) -> None:
    with pytest.raises(RuntimeError, match="features failed"), \
            notify_on_failure(hook.url, "/data/ws", what="monthly-cycle") as notice:
        notice.cutoff = "2026-09"
        raise RuntimeError("features failed: no rows")
    (body,) = hook.received
    assert body["event"] == "run_failed" and body["cutoff"] == "2026-09"
    assert "monthly-cycle failed: RuntimeError: features failed" in body["message"]


def test_failure_context_is_silent_on_success(hook: Hook) -> None:
    with notify_on_failure(hook.url, "/data/ws", "2026-09"):
        pass
    assert hook.received == []


def test_helpers() -> None:
    assert redact("https://hooks.example.org:8443/services/T0/B0/XYZ?token=1") == "https://hooks.example.org:8443/…"
    assert rejected_entries([("a.csv", "bad", "a.txt"), {"file_name": "b.csv", "reason": "r"}]) == [
        {"file": "a.csv", "reason": "bad", "report": "a.txt"}, {"file": "b.csv", "reason": "r", "report": ""}]
    with pytest.raises(ValueError, match="not one of"):
        build_message("run_exploded", "w", None, "m")
    long = build_message("files_rejected", "w", "2026-01", "m",
                         [{"file": f"f{i}.csv", "reason": "", "report": ""} for i in range(12)])
    assert "and 2 more" in long["text"] and len(long["rejected"]) == 12


def test_environment_overrides_config(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.delenv("DYADCAST_WEBHOOK_URL", raising=False)
    assert webhook_url(" http://a/ ") == "http://a/"
    monkeypatch.setenv("DYADCAST_WEBHOOK_URL", "http://b/")
    assert webhook_url("http://a/") == "http://b/"
