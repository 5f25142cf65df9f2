"""Open a local HTML file in headless Chromium through the DevTools protocol and record what happened:
every request the page made, console errors and exceptions, a full-page screenshot, and a few DOM facts.

Protocol methods used (Chrome DevTools Protocol, https://chromedevtools.github.io/devtools-protocol/):
Target.createTarget / attachToTarget (flat sessions), Network/Runtime/Log/Page.enable,
Emulation.setDeviceMetricsOverride, Page.navigate, Page.loadEventFired, Page.getLayoutMetrics,
Page.captureScreenshot, Runtime.evaluate, Browser.close.
"""

from __future__ import annotations

import base64
import contextlib
import json
import shutil
import subprocess
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

CHROMIUM = shutil.which("chromium") or shutil.which("chromium-browser") or "/usr/bin/chromium"
FLAGS = [
    "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
    "--disable-background-networking", "--disable-component-update", "--disable-sync",
]
LOCAL_SCHEMES = ("file:", "data:", "about:")


@dataclass
class PageVisit:
    requests: list[str] = field(default_factory=list)  # every URL the page asked for
    console_errors: list[str] = field(default_factory=list)
    loaded: bool = False
    title: str = ""
    script_count: int = -1
    body_text: str = ""
    height: int = 0

    @property
    def network_requests(self) -> list[str]:
        return [u for u in self.requests if not u.startswith(LOCAL_SCHEMES)]


def chromium_available() -> bool:
    return Path(CHROMIUM).is_file()


class _Session:
    def __init__(self, ws: Any) -> None:
        self.ws, self.next_id, self.events = ws, 0, []

    def call(self, method: str, params: dict | None = None, session: str | None = None, timeout: float = 30) -> dict:
        self.next_id += 1
        message: dict[str, Any] = {"id": self.next_id, "method": method, "params": params or {}}
        if session:
            message["sessionId"] = session
        self.ws.send(json.dumps(message))
        deadline = time.monotonic() + timeout
        while True:
            reply = json.loads(self.ws.recv(timeout=max(deadline - time.monotonic(), 0.01)))
            if reply.get("id") == self.next_id:
                if "error" in reply:
                    raise RuntimeError(f"{method}: {reply['error']}")
                return reply.get("result", {})
            self.events.append(reply)

    def wait_for(self, method: str, timeout: float = 30) -> bool:
        deadline = time.monotonic() + timeout
        while time.monotonic() < deadline:
            if any(e.get("method") == method for e in self.events):
                return True
            try:
                self.events.append(json.loads(self.ws.recv(timeout=max(deadline - time.monotonic(), 0.01))))
            except TimeoutError:
                break
        return any(e.get("method") == method for e in self.events)


def _devtools_url(profile: Path, proc: subprocess.Popen, timeout: float = 30) -> str:
    port_file = profile / "DevToolsActivePort"
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        if port_file.is_file():
            lines = port_file.read_text().split()
            if len(lines) >= 2:
                return f"ws://127.0.0.1:{lines[0]}{lines[1]}"
        if proc.poll() is not None:
            raise RuntimeError(f"chromium exited with code {proc.returncode} before opening DevTools")
        time.sleep(0.05)
    raise RuntimeError("chromium did not open its DevTools port within 30 s")


def visit(html_path: Path, screenshot: Path, profile: Path, width: int = 1280, height: int = 4000) -> PageVisit:
    """Load the file, wait for the load event, then collect requests, errors, DOM facts and a screenshot."""
    from websockets.sync.client import connect

    (profile / "DevToolsActivePort").unlink(missing_ok=True)  # a stale one would point at a dead browser
    proc = subprocess.Popen(
        [CHROMIUM, *FLAGS, f"--user-data-dir={profile}", "--remote-debugging-port=0", "about:blank"],
        stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL,
    )
    out = PageVisit()
    try:
        with connect(_devtools_url(profile, proc), max_size=2**28, open_timeout=30) as ws:
            s = _Session(ws)
            target = s.call("Target.createTarget", {"url": "about:blank"})["targetId"]
            sid = s.call("Target.attachToTarget", {"targetId": target, "flatten": True})["sessionId"]
            for domain in ("Network", "Runtime", "Log", "Page"):
                s.call(f"{domain}.enable", session=sid)
            s.call("Emulation.setDeviceMetricsOverride",
                   {"width": width, "height": height, "deviceScaleFactor": 1, "mobile": False}, session=sid)
            s.call("Page.navigate", {"url": html_path.resolve().as_uri()}, session=sid)
            out.loaded = s.wait_for("Page.loadEventFired")
            time.sleep(0.3)  # late console messages or requests, if any, arrive now

            def evaluate(expression: str) -> Any:
                return s.call("Runtime.evaluate", {"expression": expression, "returnByValue": True},
                              session=sid)["result"].get("value")

            out.title = evaluate("document.title")
            out.script_count = evaluate("document.getElementsByTagName('script').length")
            out.body_text = evaluate("document.body.innerText")
            metrics = s.call("Page.getLayoutMetrics", session=sid)
            out.height = int(metrics["cssContentSize"]["height"])
            shot = s.call("Page.captureScreenshot", {
                "format": "png", "captureBeyondViewport": True,
                "clip": {"x": 0, "y": 0, "width": width, "height": out.height, "scale": 1},
            }, session=sid)
            screenshot.write_bytes(base64.b64decode(shot["data"]))
            for event in s.events:
                method, params = event.get("method"), event.get("params", {})
                if method == "Network.requestWillBeSent":
                    out.requests.append(params["request"]["url"])
                elif method == "Runtime.exceptionThrown":
                    out.console_errors.append(json.dumps(params["exceptionDetails"])[:300])
                elif method == "Runtime.consoleAPICalled" and params.get("type") in ("error", "assert"):
                    out.console_errors.append(json.dumps(params.get("args"))[:300])
                elif method == "Log.entryAdded" and params["entry"].get("level") == "error":
                    out.console_errors.append(params["entry"].get("text", "")[:300])
            with contextlib.suppress(Exception):  # the browser may close the socket before replying
                s.call("Browser.close", timeout=5)
    finally:
        try:
            proc.wait(timeout=10)
        except subprocess.TimeoutExpired:
            proc.kill()
            proc.wait(timeout=10)
    return out
