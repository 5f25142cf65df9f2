"""One run per workspace at a time.

Two runs on one workspace would race on the inbox, the warehouse and the snapshot folders. The lock is
an advisory `fcntl.flock` on `ws.lock_path`: the kernel drops it when the holding process ends, however
it ends (kill -9 included), so a crash never leaves a stale lock to delete by hand. The file also holds
who took the lock (pid, host, start time, command) so that a refused run can say who is busy.

The lock is re-entrant within one process: the CLI takes it before starting Prefect (to refuse in
milliseconds, not after a 30 s server start) and the flow takes it again for scheduled runs.
"""

from __future__ import annotations

import fcntl
import json
import os
import socket
import sys
import threading
import time
from collections.abc import Iterator
from contextlib import contextmanager
from dataclasses import asdict, dataclass
from datetime import UTC, datetime
from pathlib import Path

BUSY_EXIT_CODE = 75  # EX_TEMPFAIL from sysexits.h: "try again later", so schedulers can tell busy from failed


class RunLockedError(RuntimeError):
    """Another process holds the workspace lock; the message names it and says what to do."""

    def __init__(self, message: str, holder: LockHolder | None) -> None:
        super().__init__(message)
        self.holder = holder


@dataclass(frozen=True)
class LockHolder:
    pid: int
    host: str
    started_at: str
    purpose: str
    command: str

    def describe(self) -> str:
        return (f"{self.purpose} started {self.started_at} by pid {self.pid} on host {self.host} "
                f"(command: {self.command})")


@dataclass
class _Held:
    fd: int
    depth: int
    pid: int
    holder: LockHolder


_HELD: dict[str, _Held] = {}
_GUARD = threading.Lock()


def _key(path: Path) -> str:
    return str(Path(path).resolve())


def read_holder(path: Path | str) -> LockHolder | None:
    """Who wrote the lock file last; None when it is empty or unreadable (e.g. mid-write)."""
    try:
        data = json.loads(Path(path).read_text(encoding="utf-8") or "null")
        return LockHolder(**data) if isinstance(data, dict) else None
    except (OSError, ValueError, TypeError):
        return None


def is_locked(path: Path | str) -> bool:
    """True while some process (this one included) holds the lock."""
    if _key(Path(path)) in _HELD and _HELD[_key(Path(path))].pid == os.getpid():
        return True
    if not Path(path).exists():
        return False
    fd = os.open(path, os.O_RDONLY)
    try:
        fcntl.flock(fd, fcntl.LOCK_SH | fcntl.LOCK_NB)
    except BlockingIOError:
        return True
    finally:
        os.close(fd)
    return False


def _refusal(path: Path, holder: LockHolder | None) -> str:
    who = holder.describe() if holder else "another process (it has not yet written its details)"
    remote = holder is not None and holder.host != socket.gethostname()
    return (
        f"workspace {path.parent} is busy: {who} holds {path}. "
        "Only one run per workspace at a time: wait for it to finish and run again. "
        "Nothing needs deleting: the lock is released automatically when that process ends"
        + (" (it runs on another host: check that host; flock over network file systems is unreliable)."
           if remote else ".")
    )


def acquire(path: Path | str, purpose: str = "run", wait_s: float = 0.0) -> LockHolder:
    """Take the lock or raise RunLockedError; `wait_s` > 0 retries for that long before refusing."""
    path = Path(path)
    key = _key(path)
    with _GUARD:
        held = _HELD.get(key)
        if held is not None and held.pid == os.getpid():
            held.depth += 1
            return held.holder
        path.parent.mkdir(parents=True, exist_ok=True)
        fd = os.open(path, os.O_RDWR | os.O_CREAT, 0o644)  # not inheritable (PEP 446): children cannot keep it
        deadline = time.monotonic() + wait_s
        while True:
            try:
                fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
                break
            except BlockingIOError:
                if time.monotonic() >= deadline:
                    os.close(fd)
                    holder = read_holder(path)
                    raise RunLockedError(_refusal(path, holder), holder) from None
                time.sleep(min(1.0, max(0.05, deadline - time.monotonic())))
        holder = LockHolder(
            pid=os.getpid(), host=socket.gethostname(),
            started_at=datetime.now(UTC).isoformat(timespec="seconds"), purpose=purpose,
            command=" ".join([Path(sys.argv[0]).name, *sys.argv[1:]])[:300] if sys.argv else "python",
        )
        os.ftruncate(fd, 0)
        os.pwrite(fd, json.dumps(asdict(holder)).encode("utf-8"), 0)
        _HELD[key] = _Held(fd=fd, depth=1, pid=os.getpid(), holder=holder)
        return holder


def release(path: Path | str) -> None:
    """Undo one `acquire`; the outermost release drops the lock (the file stays, harmlessly)."""
    key = _key(Path(path))
    with _GUARD:
        held = _HELD.get(key)
        if held is None or held.pid != os.getpid():
            return
        held.depth -= 1
        if held.depth > 0:
            return
        del _HELD[key]
        try:
            os.ftruncate(held.fd, 0)
        finally:
            fcntl.flock(held.fd, fcntl.LOCK_UN)
            os.close(held.fd)


@contextmanager
def run_lock(path: Path | str, purpose: str = "run", wait_s: float = 0.0) -> Iterator[LockHolder]:
    """Hold the workspace lock for the body; usage: `with run_lock(ws.lock_path, "monthly-cycle"):`."""
    holder = acquire(path, purpose, wait_s)
    try:
        yield holder
    finally:
        release(path)
