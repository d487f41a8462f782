"""``return_freed_memory`` gives freed pages back to the operating system (the link command calls it
after letting go of a register's partitions, before its chunks go to Dask workers).

Reference: the process's resident set as the operating system reports it (psutil), and glibc's
documented behaviour (malloc(3), malloc_trim(3)): blocks above Python's small-object limit come
from the C heap, and free pages below a block still in use stay with the process until
``malloc_trim`` returns them.
"""
from __future__ import annotations

import platform

import psutil
import pytest

from titlematch.runtime.memory import return_freed_memory


@pytest.mark.skipif(platform.libc_ver()[0] != "glibc", reason="malloc_trim is glibc's; elsewhere nothing is trimmed")
def test_pages_freed_behind_blocks_still_in_use_go_back_to_the_system():
    rss = lambda: psutil.Process().memory_info().rss  # noqa: E731
    base = rss()
    blocks = [bytes(4_000) + i.to_bytes(8, "little") for i in range(50_000)]  # about 200 MB on the C heap
    grown = rss() - base
    kept = blocks[::64]  # one block in 64 stays: the heap cannot shrink from its top
    del blocks
    assert rss() - base > grown / 2  # freed, but still held by the process
    assert return_freed_memory() is True
    assert rss() - base < grown / 4
    assert len(kept) == 782
