"""Pausing Python's cyclic garbage collector while one large request is worked on.

Decoding a large body and building its result allocate hundreds of thousands of containers;
each allocation burst triggers collections, and every full collection walks the whole server
heap (framework, ORM, everything alive). Reference counting still frees the request's objects
while the collector is paused; collection resumes as soon as no large request is in progress.
"""

from __future__ import annotations

import gc
import threading
from collections.abc import Iterator
from contextlib import contextmanager

_lock = threading.Lock()
_depth = 0
_restore = False


@contextmanager
def paused_gc() -> Iterator[None]:
    """Disable the cyclic collector for the block (nestable across threads)."""
    global _depth, _restore
    with _lock:
        if _depth == 0:
            _restore = gc.isenabled()
            gc.disable()
        _depth += 1
    try:
        yield
    finally:
        with _lock:
            _depth -= 1
            if _depth == 0 and _restore:
                gc.enable()
