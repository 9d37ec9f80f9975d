"""A small in-process cache of rendered charts.

A stored assessment never changes, so a series' charts can be kept once drawn: a person who
opens the same failing series again (or shares its link) gets the page without redrawing.
Least recently used entries go first; the cache is per process and optional.
"""

from __future__ import annotations

import threading
from collections import OrderedDict
from collections.abc import Callable, Hashable

from .charts import Chart

DEFAULT_SIZE = 64
"""Entries kept: a series (about 5 charts of some 30-100 kB each) or a fleet page (3 charts,
at most a few hundred kB together)."""


class ChartCache:
    """Thread-safe LRU of ``key -> charts``; ``size = 0`` disables it."""

    def __init__(self, size: int = DEFAULT_SIZE) -> None:
        if size < 0:
            raise ValueError(f"size must be 0 or more, got {size}")
        self.size = size
        self._items: OrderedDict[Hashable, tuple[Chart, ...]] = OrderedDict()
        self._lock = threading.Lock()
        self.hits = 0
        self.misses = 0

    def __len__(self) -> int:
        return len(self._items)

    def get_or_render(
        self, key: Hashable, render: Callable[[], tuple[Chart, ...]]
    ) -> tuple[Chart, ...]:
        with self._lock:
            found = self._items.get(key)
            if found is not None:
                self._items.move_to_end(key)
                self.hits += 1
                return found
            self.misses += 1
        charts = render()  # outside the lock: drawing takes a while
        if self.size:
            with self._lock:
                self._items[key] = charts
                self._items.move_to_end(key)
                while len(self._items) > self.size:
                    self._items.popitem(last=False)
        return charts
