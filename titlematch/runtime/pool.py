"""Spread row-wise work over the cores of one machine: a forked process pool over slices of the rows.

The work is pure Python for the most part (normalizers, n-gram analyzers), so threads would queue on
the interpreter lock; processes do not. Workers are forked, so they start with the caller's memory
(a register index, a fitted model) without sending it; only each slice's result comes back. Results
are returned in slice order and every slice is processed by the same function as in one process, so
the output is the same for any number of workers.

Forking needs a POSIX system and a process that may have children: on Windows, inside a daemonic
process (a Dask worker) or with one worker the slices run here, one after the other.

Example
-------
>>> map_slices(lambda part: part * 2, [1, 2, 3], workers=2)   # doctest: +SKIP
[2, 4, 6]
"""
from __future__ import annotations

import multiprocessing
from concurrent.futures import ThreadPoolExecutor
import os
from collections.abc import Callable, Sequence

_JOB: tuple[Callable, Sequence] | None = None  # what forked workers find in their copy of memory


def available_cores() -> int:
    """Cores this process may run on (its CPU affinity where the system tells it)."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except (AttributeError, OSError):
        return max(1, os.cpu_count() or 1)


def resolve_workers(workers: int | None) -> int:
    """``None``, 0 or a negative number: every available core; otherwise ``workers``, at least 1."""
    if workers is None or workers <= 0:
        return available_cores()
    return int(workers)


def can_fork() -> bool:
    return ("fork" in multiprocessing.get_all_start_methods()
            and not multiprocessing.current_process().daemon)


def in_worker() -> bool:
    """True inside a worker of ``map_slices`` (nested work then stays in that process)."""
    return _IN_WORKER


_IN_WORKER = False


def _run(k: int):
    global _IN_WORKER
    _IN_WORKER = True
    func, items = _JOB
    return func(items[k])


def thread_count(limit: int) -> int:
    """Threads for work that runs without the interpreter lock (scipy's sparse products, numpy's
    sorts and indexing): up to ``limit`` and the cores available, one inside a ``map_slices`` worker,
    whose siblings already use the other cores."""
    return 1 if _IN_WORKER else max(1, min(limit, available_cores()))


def map_threads(func: Callable, items: Sequence, limit: int) -> list:
    """``[func(item) for item in items]`` on up to ``thread_count(limit)`` threads, in order. For
    work whose result per item does not depend on the thread that runs it."""
    threads = thread_count(limit)
    if threads <= 1 or len(items) <= 1:
        return [func(item) for item in items]
    with ThreadPoolExecutor(threads) as executor:
        return list(executor.map(func, items))


def map_slices(func: Callable, items: Sequence, workers: int | None = -1) -> list:
    """``[func(item) for item in items]``, computed by up to ``workers`` forked processes."""
    global _JOB
    n = min(resolve_workers(workers), len(items))
    if n <= 1 or _IN_WORKER or not can_fork():
        return [func(item) for item in items]
    _JOB = (func, items)
    try:
        context = multiprocessing.get_context("fork")
        with context.Pool(n) as pool:
            return pool.map(_run, range(len(items)), chunksize=1)
    finally:
        _JOB = None


def slices(n: int, parts: int, minimum: int = 1) -> list[slice]:
    """``n`` rows cut into at most ``parts`` contiguous slices of at least ``minimum`` rows."""
    parts = max(1, min(parts, n // max(minimum, 1)))
    bounds = [round(k * n / parts) for k in range(parts + 1)]
    return [slice(a, b) for a, b in zip(bounds[:-1], bounds[1:])]
