"""Wall time, CPU time and peak resident memory of the stages run inside one benchmark process.

How peak memory is measured (the README says the same): a psutil thread samples the RSS of this process
and its children every `interval` seconds; `resource.getrusage(RUSAGE_SELF).ru_maxrss` (the kernel's exact
high-water mark, KiB on Linux) is read before and after each stage. When the high-water mark rose during a
stage, that exact value is the stage's peak; otherwise the stage stayed below an earlier peak and the
sampled maximum is used (it can miss spikes shorter than `interval`).

Results are written to a JSON file after every stage, so a stage killed by the time budget still leaves
the stages before it, and the name and start time of the one that was running.
"""

from __future__ import annotations

import json
import os
import resource
import threading
import time
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import Any

import psutil

MB = 1024 * 1024


def max_rss_mb() -> float:
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024  # Linux: KiB


class Meter:
    def __init__(self, out: Path | None = None, interval: float = 0.02) -> None:
        self.out = out
        self.interval = interval
        self.records: list[dict[str, Any]] = []
        self.extra: dict[str, Any] = {}
        self.running: dict[str, Any] | None = None
        self._process = psutil.Process(os.getpid())
        self._peak = 0.0
        self._generation = 0  # bumped at each stage start, so a sample taken before it is discarded
        self._lock = threading.Lock()
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._sample, name="bench-meter", daemon=True)
        self._thread.start()

    def rss_mb(self) -> float:
        total = self._process.memory_info().rss
        for child in self._process.children(recursive=True):
            try:
                total += child.memory_info().rss
            except psutil.Error:
                continue
        return total / MB

    def _sample(self) -> None:
        while not self._stop.wait(self.interval):
            generation = self._generation
            try:
                value = self.rss_mb()
            except psutil.Error:
                continue
            with self._lock:
                if generation == self._generation:
                    self._peak = max(self._peak, value)

    @contextmanager
    def stage(self, name: str, **details: Any) -> Iterator[dict[str, Any]]:
        """Measure the block; the yielded dict collects details the block wants in the results."""
        record: dict[str, Any] = {"stage": name, **details}
        with self._lock:
            self._generation += 1
            before = self.rss_mb()
            self._peak = before
        high_before = max_rss_mb()
        self.running = {"stage": name, "started_unix": time.time()}
        self.save()
        wall, cpu = time.perf_counter(), time.process_time()
        try:
            yield record
        except BaseException as exc:
            record["status"] = f"failed: {type(exc).__name__}: {str(exc).splitlines()[0] if str(exc) else ''}"
            raise
        finally:
            record["wall_s"] = round(time.perf_counter() - wall, 3)
            record["cpu_s"] = round(time.process_time() - cpu, 3)
            high_after = max_rss_mb()
            with self._lock:
                sampled = max(self._peak, self.rss_mb())
            exact = high_after if high_after > high_before else 0.0
            record["rss_before_mb"] = round(before, 1)
            record["peak_rss_mb"] = round(max(sampled, exact), 1)
            record["peak_source"] = "ru_maxrss" if exact >= sampled else "sampled"
            record.setdefault("status", "ok")
            self.records.append(record)
            self.running = None
            self.save()

    def save(self) -> None:
        if self.out is None:
            return
        self.out.parent.mkdir(parents=True, exist_ok=True)
        tmp = self.out.with_suffix(".tmp")
        payload = {"records": self.records, "running": self.running, "extra": self.extra,
                   "process_max_rss_mb": round(max_rss_mb(), 1), "loadavg": os.getloadavg()}
        tmp.write_text(json.dumps(payload, indent=1, default=str), encoding="utf-8")
        tmp.replace(self.out)

    def close(self) -> None:
        self._stop.set()
        self._thread.join(timeout=1)
        self.save()
