"""Process-wide tuning for long command-line runs (not applied on library import)."""

from __future__ import annotations

import contextlib
import ctypes
import ctypes.util

# glibc mallopt() parameters (malloc.h)
_M_TRIM_THRESHOLD = -1
_M_MMAP_THRESHOLD = -3


def keep_freed_memory(mmap_threshold: int = 32 << 20, trim_threshold: int = 128 << 20) -> bool:
    """Ask glibc to reuse freed large blocks instead of returning them to the system.

    Every batch allocates numpy temporaries of a few MB; by default glibc serves each from
    a fresh mmap and unmaps it when freed, so every batch pays page faults again (about a
    quarter of a check's time here).  Raising the mmap and trim thresholds keeps those
    blocks in the heap for reuse: batch-sized blocks (below 32 MB) come from the heap, and
    up to 128 MB of freed heap is kept, so peak memory grows little while the page faults
    go.  Returns False where this is not glibc (nothing done).
    """
    name = ctypes.util.find_library("c")
    if not name:
        return False
    try:
        libc = ctypes.CDLL(name)
        mallopt = libc.mallopt
    except (OSError, AttributeError):
        return False
    return bool(mallopt(_M_MMAP_THRESHOLD, mmap_threshold)) and bool(
        mallopt(_M_TRIM_THRESHOLD, trim_threshold))


def release_free_memory() -> None:
    """Give freed memory back to the system: glibc's retained heap and Arrow's pool.

    Call it before forking workers: a child that reuses a retained free block writes to
    a page shared with the parent, which copies it, so every worker would otherwise
    duplicate the parent's retained memory.
    """
    import pyarrow as pa

    pa.default_memory_pool().release_unused()
    name = ctypes.util.find_library("c")
    if not name:
        return
    with contextlib.suppress(OSError, AttributeError):
        ctypes.CDLL(name).malloc_trim(0)
