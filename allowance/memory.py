"""Freed memory handed back to the system between the steps of a run.

Implements
----------
give_back   return the memory Arrow's pool and the C heap keep after it was freed
given_back  run work (on a thread of its own), then give back what it freed

Arrow's memory pool keeps the pages it freed for its next allocations, and the C allocator
keeps freed small blocks on its heap; neither goes back to the system by itself. After
reading a tape (Arrow's parse of a million rows: some 200 MB kept) and after the engine (a
heap of freed per-chunk objects), that memory would otherwise sit under the peak of writing.
"""

from __future__ import annotations

import ctypes
from collections.abc import Callable
from typing import Any

__all__ = ["give_back", "given_back"]


def give_back() -> None:
    """Hand freed memory back to the system: Arrow's pool releases what it keeps unused, and
    glibc trims its heap (``malloc_trim``; nothing where the C library has none)."""
    import pyarrow as pa

    pa.default_memory_pool().release_unused()
    try:
        ctypes.CDLL(None).malloc_trim(0)
    except (OSError, AttributeError):  # not glibc: the allocator keeps its own counsel
        pass


def given_back(work: Callable[..., Any], *args: Any, **kwargs: Any) -> Any:
    """``work(*args, **kwargs)``, then what it freed handed back (:func:`give_back`). For work
    submitted to a thread: a thread's C heap keeps its freed blocks, which no other thread
    reuses."""
    try:
        return work(*args, **kwargs)
    finally:
        give_back()
