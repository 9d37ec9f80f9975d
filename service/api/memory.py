"""Memory handed back to the system between the stages of a big job.

A big Parquet job allocates and frees hundreds of MiB in a stage (the scan of the file, each
part's observations, the fleet decision) on threads of its own. CPython and pyarrow keep freed
memory for reuse, and glibc keeps each thread's freed blocks in that thread's arena, where
another thread's next stage cannot use them: the resident memory would grow by what earlier
stages left behind. :func:`release_memory` collects garbage, empties pyarrow's pool of unused
blocks and asks glibc to return every free page of every arena (``malloc_trim(0)``; elsewhere
it does nothing more).
"""

from __future__ import annotations

import ctypes
import ctypes.util
import gc
import sys
from functools import lru_cache
from typing import Any


@lru_cache(maxsize=1)
def _libc() -> Any:
    if not sys.platform.startswith("linux"):
        return None
    try:
        libc = ctypes.CDLL(ctypes.util.find_library("c") or "libc.so.6")
        return libc if hasattr(libc, "malloc_trim") else None
    except OSError:
        return None


def release_memory() -> None:
    """Collect garbage and hand freed memory back to the system (see the module docstring)."""
    gc.collect()
    pyarrow = sys.modules.get("pyarrow")
    if pyarrow is not None:
        pyarrow.default_memory_pool().release_unused()
    libc = _libc()
    if libc is not None:
        libc.malloc_trim(0)
