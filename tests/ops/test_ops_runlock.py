"""The workspace run lock: a second process is refused with a useful message; a killed holder frees it."""

from __future__ import annotations

import os
import signal
import socket
import subprocess
import sys
import time
from pathlib import Path

import pytest

from dyadcast.runlock import RunLockedError, acquire, is_locked, read_holder, release, run_lock

HOLD = """
import sys, time
from dyadcast.runlock import run_lock
with run_lock(sys.argv[1], "test-holder"):
    print("locked", flush=True)
    time.sleep(120)
"""

TRY = """
import sys
from dyadcast.runlock import RunLockedError, run_lock
try:
    with run_lock(sys.argv[1], "test-second"):
        print("acquired", flush=True)
except RunLockedError as exc:
    print(exc, flush=True)
    sys.exit(75)
"""


def _start_holder(lock: Path) -> subprocess.Popen:
    proc = subprocess.Popen([sys.executable, "-c", HOLD, str(lock)], stdout=subprocess.PIPE, text=True)
    assert proc.stdout.readline().strip() == "locked"
    return proc


def _try(lock: Path) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-c", TRY, str(lock)], capture_output=True, text=True, timeout=60)


def test_second_process_is_refused_and_kill_9_releases(tmp_path: Path) -> None:
    lock = tmp_path / ".run.lock"
    holder = _start_holder(lock)
    try:
        refused = _try(lock)
        assert refused.returncode == 75, refused.stderr
        message = refused.stdout
        assert f"pid {holder.pid}" in message and socket.gethostname() in message
        assert "test-holder" in message and "busy" in message and "wait for it to finish" in message
        assert is_locked(lock)
    finally:
        os.kill(holder.pid, signal.SIGKILL)
        holder.wait(timeout=30)
    # the kernel released the flock with the process: no stale lock to delete by hand
    assert not is_locked(lock)
    again = _try(lock)
    assert again.returncode == 0 and again.stdout.strip() == "acquired", again.stdout + again.stderr


def test_in_process_reentrant_and_released(tmp_path: Path) -> None:
    lock = tmp_path / "ws" / ".run.lock"
    with run_lock(lock, "outer") as outer:
        assert read_holder(lock) == outer and outer.pid == os.getpid()
        with run_lock(lock, "inner") as inner:  # CLI takes it, then the flow takes it again
            assert inner == outer
        assert is_locked(lock), "the inner release must not drop the outer hold"
        refused = _try(lock)
        assert refused.returncode == 75 and "outer" in refused.stdout
    assert not is_locked(lock)
    assert read_holder(lock) is None, "the holder details are cleared on release"


def test_lock_is_released_when_the_body_raises(tmp_path: Path) -> None:
    lock = tmp_path / ".run.lock"
    with pytest.raises(RuntimeError, match="step failed"), run_lock(lock):
        raise RuntimeError("step failed")
    assert not is_locked(lock)


def test_wait_gives_up_after_the_timeout(tmp_path: Path) -> None:
    lock = tmp_path / ".run.lock"
    holder = _start_holder(lock)
    try:
        started = time.monotonic()
        with pytest.raises(RunLockedError) as info:
            acquire(lock, "waiter", wait_s=0.6)
        assert 0.5 <= time.monotonic() - started < 10
        assert info.value.holder is not None and info.value.holder.pid == holder.pid
    finally:
        os.kill(holder.pid, signal.SIGKILL)
        holder.wait(timeout=30)
    acquire(lock, "waiter", wait_s=5)  # free now
    release(lock)


def test_unreadable_holder_details_still_give_a_message(tmp_path: Path) -> None:
    lock = tmp_path / ".run.lock"
    holder = _start_holder(lock)
    try:
        lock.write_text("{not json", encoding="utf-8")  # e.g. read in the middle of a write
        assert read_holder(lock) is None
        refused = _try(lock)
        assert refused.returncode == 75 and "another process" in refused.stdout
    finally:
        os.kill(holder.pid, signal.SIGKILL)
        holder.wait(timeout=30)
    assert not is_locked(lock)
