from __future__ import annotations

import pytest

from service.report.cache import ChartCache
from service.report.charts import Chart


def _charts(tag: str) -> tuple[Chart, ...]:
    return (Chart(name="acf", title="t", caption="c", svg=f"<svg>{tag}</svg>"),)


def test_lru_keeps_the_most_recent() -> None:
    cache = ChartCache(size=2)
    calls: list[str] = []

    def render(tag: str):
        def go():
            calls.append(tag)
            return _charts(tag)

        return go

    assert cache.get_or_render("a", render("a"))[0].svg == "<svg>a</svg>"
    cache.get_or_render("b", render("b"))
    cache.get_or_render("a", render("a"))  # hit: "a" becomes the most recent
    cache.get_or_render("c", render("c"))  # evicts "b"
    cache.get_or_render("b", render("b"))  # drawn again
    assert calls == ["a", "b", "c", "b"]
    assert (cache.hits, cache.misses, len(cache)) == (1, 4, 2)


def test_size_zero_disables() -> None:
    cache = ChartCache(size=0)
    calls = []
    for _ in range(2):
        cache.get_or_render("a", lambda: calls.append(1) or _charts("a"))
    assert len(calls) == 2 and len(cache) == 0
    with pytest.raises(ValueError, match="size"):
        ChartCache(size=-1)
