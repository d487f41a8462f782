"""Shared helpers for the benchmark scripts: timing, peak memory, printing side by side."""
from __future__ import annotations

import os
import threading
import time
from contextlib import contextmanager

import psutil


class PeakMemory:
    """Samples this process's resident memory in a thread; ``peak_mb`` after the block."""

    def __init__(self, interval: float = 0.05):
        self.interval = interval
        self.peak = 0
        self._stop = threading.Event()

    def __enter__(self):
        proc = psutil.Process(os.getpid())
        self.base = proc.memory_info().rss

        def sample():
            while not self._stop.is_set():
                self.peak = max(self.peak, proc.memory_info().rss)
                time.sleep(self.interval)
        self._thread = threading.Thread(target=sample, daemon=True)
        self._thread.start()
        return self

    def __exit__(self, *exc):
        self._stop.set()
        self._thread.join()

    @property
    def peak_mb(self) -> float:
        return self.peak / 2 ** 20


@contextmanager
def timed(results: dict, name: str):
    start = time.perf_counter()
    yield
    results[name] = time.perf_counter() - start


def table(rows: list[tuple], header: tuple) -> str:
    widths = [max(len(str(r[i])) for r in rows + [header]) for i in range(len(header))]
    line = lambda r: "  ".join(str(v).ljust(w) for v, w in zip(r, widths))
    return "\n".join([line(header), line(tuple("-" * w for w in widths))] + [line(r) for r in rows])
