"""Tell someone when a monthly run fails or rejects files: a short JSON POST to a configured webhook.

A notification must never turn a good run into a failed one, nor hang a run on a dead endpoint: every
error is caught and reported on stderr, and the request has a short timeout. The payload carries the
fields our users asked for plus a `text` line, which chat tools that accept incoming webhooks display.
"""

from __future__ import annotations

import json
import os
import socket
import sys
import urllib.error
import urllib.parse
import urllib.request
from collections.abc import Callable, Iterable, Iterator, Sequence
from contextlib import contextmanager
from dataclasses import dataclass
from datetime import UTC, datetime
from typing import Any

from dyadcast import __version__

EVENTS = ("run_failed", "files_rejected", "run_succeeded")
DEFAULT_TIMEOUT_S = 5.0
Log = Callable[[str], None]


def _stderr(message: str) -> None:
    print(message, file=sys.stderr, flush=True)


@dataclass(frozen=True)
class Delivery:
    sent: bool
    detail: str  # HTTP status or the reason it was not sent


def redact(url: str) -> str:
    """Scheme and host only: webhook paths and queries are usually secrets and must not reach logs."""
    parts = urllib.parse.urlsplit(url)
    return f"{parts.scheme}://{parts.hostname or '?'}{f':{parts.port}' if parts.port else ''}/…"


def rejected_entries(rejected: Iterable[Any]) -> list[dict[str, str]]:
    """Normalise the ingest summary's rejected items (objects, dicts or tuples) to small dicts."""
    out = []
    for item in rejected:
        if isinstance(item, dict):
            get = item.get
        elif isinstance(item, (tuple, list)):
            values = dict(zip(("file", "reason", "report"), item, strict=False))
            get = values.get
        else:
            def get(name: str, _item: Any = item) -> Any:
                return getattr(_item, name, None)
        file = get("file") or get("file_name") or get("name") or str(item)
        reason = get("reason") or ""
        report = get("report") or get("report_path") or ""
        out.append({"file": str(getattr(file, "name", file)), "reason": str(reason), "report": str(report)})
    return out


def build_message(
    event: str, workspace: str, cutoff: str | None, message: str, rejected: Sequence[dict[str, str]] = (),
) -> dict[str, Any]:
    if event not in EVENTS:
        raise ValueError(f"event {event!r} is not one of {EVENTS}")
    headline = {"run_failed": "dyadcast run FAILED", "files_rejected": "dyadcast run rejected files",
                "run_succeeded": "dyadcast run succeeded"}[event]
    text = f"{headline} (workspace {workspace}, cutoff {cutoff or 'n/a'}): {message}"
    if rejected:
        text += " | rejected: " + ", ".join(r["file"] for r in rejected[:10])
        if len(rejected) > 10:
            text += f" and {len(rejected) - 10} more"
    return {
        "event": event,
        "workspace": workspace,
        "cutoff": cutoff,
        "message": message,
        "rejected": list(rejected),
        "host": socket.gethostname(),
        "sent_at": datetime.now(UTC).isoformat(timespec="seconds"),
        "dyadcast_version": __version__,
        "text": text,
    }


def post_json(url: str, payload: dict[str, Any], timeout_s: float = DEFAULT_TIMEOUT_S) -> Delivery:
    """POST the payload; never raises. Only http(s) URLs are used (urllib would also open file:// URLs)."""
    if urllib.parse.urlsplit(url).scheme not in ("http", "https"):
        return Delivery(False, f"webhook_url must start with http:// or https://, got {redact(url)}")
    body = json.dumps(payload, default=str).encode("utf-8")
    request = urllib.request.Request(
        url, data=body, method="POST",
        headers={"Content-Type": "application/json", "User-Agent": f"dyadcast/{__version__}"},
    )
    try:
        with urllib.request.urlopen(request, timeout=timeout_s) as response:  # noqa: S310 - scheme checked above
            return Delivery(True, f"HTTP {response.status}")
    except urllib.error.HTTPError as exc:
        return Delivery(False, f"HTTP {exc.code} {exc.reason}")
    except (urllib.error.URLError, OSError, ValueError) as exc:
        return Delivery(False, f"{type(exc).__name__}: {getattr(exc, 'reason', exc)}")


def notify(
    url: str, event: str, *, workspace: str, cutoff: str | None, message: str,
    rejected: Iterable[Any] = (), timeout_s: float = DEFAULT_TIMEOUT_S, log: Log = _stderr,
) -> Delivery:
    """Send one event if a URL is configured; a failed delivery is logged, never raised."""
    if not url:
        return Delivery(False, "no webhook_url configured")
    try:
        payload = build_message(event, workspace, cutoff, message, rejected_entries(rejected))
        delivery = post_json(url, payload, timeout_s)
    except Exception as exc:  # noqa: BLE001 - a notification must never break the run
        delivery = Delivery(False, f"{type(exc).__name__}: {exc}")
    if not delivery.sent:
        log(f"warning: webhook {redact(url)} not notified of {event} ({delivery.detail}); the run itself is "
            "unaffected. Check [notify] webhook_url in dyadcast.toml and that the endpoint is up.")
    return delivery


@dataclass
class RunNotice:
    """What the failure message should say; the flow fills in the cutoff once it knows it."""

    cutoff: str | None = None


@contextmanager
def notify_on_failure(url: str, workspace: str, cutoff: str | None = None, what: str = "run") -> Iterator[RunNotice]:
    """Post `run_failed` when the body raises (then re-raise), so scheduled runs are never silent."""
    notice = RunNotice(cutoff)
    try:
        yield notice
    except BaseException as exc:
        if isinstance(exc, GeneratorExit):
            raise
        notify(url, "run_failed", workspace=workspace, cutoff=notice.cutoff,
               message=f"{what} failed: {type(exc).__name__}: {str(exc)[:500]}")
        raise


def webhook_url(config_value: str) -> str:
    """$DYADCAST_WEBHOOK_URL (e.g. from a compose .env, keeping the secret out of dyadcast.toml) or config."""
    return os.environ.get("DYADCAST_WEBHOOK_URL", "").strip() or (config_value or "").strip()
