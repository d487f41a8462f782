"""Hand memory a step no longer needs back to the operating system.

Python frees objects into its own pools and glibc's allocator keeps freed pages for the process;
after letting go of something large (a register's partitions once the EM pass has read them) the
process would still hold its peak. ``return_freed_memory`` collects cycles and, where the C
library is glibc, asks it to give back every whole free page of its heaps (``malloc_trim``), those
below blocks still in use too. Pages held by Python's small-object pools are beyond its reach.
"""
from __future__ import annotations

import ctypes
import ctypes.util
import gc
import sys


def return_freed_memory() -> bool:
    """Collect garbage and trim the C allocator's free pages; True if the allocator was trimmed."""
    gc.collect()
    if not sys.platform.startswith("linux"):
        return False
    try:
        libc = ctypes.CDLL(ctypes.util.find_library("c") or "libc.so.6")
        trim = libc.malloc_trim
    except (OSError, AttributeError):  # musl and other C libraries have no malloc_trim
        return False
    trim.argtypes, trim.restype = [ctypes.c_size_t], ctypes.c_int
    return bool(trim(0))
