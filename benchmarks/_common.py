"""Shared helpers for the benchmark scripts: timing, peak memory, printing side by side."""
from __future__ import annotations

import os
import threading
import time
from contextlib import contextmanager

import psutil

# The titlematch command turns off numpy's huge-page advice (titlematch/cli/__init__.py says why); the
# benchmarks set it for the whole process, so the peers run under the same setting as titlematch.
# Import this module before numpy.
os.environ.setdefault("NUMPY_MADVISE_HUGEPAGE", "0")


class PeakMemory:
    """Samples this process's resident memory in a thread; ``peak_mb`` after the block.

    Subclasses change what is measured by overriding :meth:`sample`."""

    def __init__(self, interval: float = 0.05):
        self.interval = interval
        self.peak = 0
        self._stop = threading.Event()

    def sample(self) -> int:
        return psutil.Process(os.getpid()).memory_info().rss

    def __enter__(self):
        self.base = self.sample()

        def loop():
            while not self._stop.is_set():
                self.peak = max(self.peak, self.sample())
                time.sleep(self.interval)
        self._thread = threading.Thread(target=loop, daemon=True)
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


class TreeMemory(PeakMemory):
    """Peak memory of this process and its children, sampled every ``interval`` seconds: this
    process's resident set plus each child's unique set (forked workers share the parent's pages)."""

    def __init__(self, interval: float = 0.5):
        super().__init__(interval)

    def sample(self) -> int:
        import psutil
        me = psutil.Process()
        total = me.memory_info().rss
        for child in me.children(recursive=True):
            try:
                total += child.memory_full_info().uss
            except (psutil.Error, OSError):
                pass
        return total
