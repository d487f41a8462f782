"""runtime.pool: forked workers and threads, the count decided in one place."""
from __future__ import annotations

import numpy as np

import titlematch.runtime.pool as pool


def _threads_here(_):
    return pool.thread_count(4)


def test_thread_count_follows_the_limit_the_cores_and_the_workers(monkeypatch):
    monkeypatch.setattr(pool, "available_cores", lambda: 2)
    assert pool.thread_count(4) == 2 and pool.thread_count(1) == 1 and pool.thread_count(0) == 1
    monkeypatch.setattr(pool, "available_cores", lambda: 8)
    assert pool.thread_count(4) == 4
    # inside a forked worker the siblings hold the other cores: one thread
    assert pool.map_slices(_threads_here, [0, 1], workers=2) == [1, 1]


def test_map_threads_returns_results_in_order(monkeypatch):
    monkeypatch.setattr(pool, "available_cores", lambda: 4)
    rng = np.random.default_rng(0)
    blocks = [rng.random((50, 40)) for _ in range(9)]
    expected = [b @ b.T for b in blocks]  # numpy's product releases the interpreter lock
    got = pool.map_threads(lambda b: b @ b.T, blocks, limit=4)
    assert len(got) == 9 and all(np.array_equal(a, b) for a, b in zip(got, expected))
    assert pool.map_threads(lambda b: b.sum(), [], limit=4) == []
