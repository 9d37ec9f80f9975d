"""The token bucket behind the per-token rate limit, on a clock the test moves by hand.

Expected values follow from the token-bucket definition (a bucket of ``burst`` tokens refilled at
``rate`` a second, one token a request), worked by hand beside each assertion.
"""

from __future__ import annotations

import pytest

from service.api.limits import RateLimiter


class Clock:
    def __init__(self) -> None:
        self.now = 1000.0

    def __call__(self) -> float:
        return self.now


def test_burst_then_refill_at_the_rate():
    clock = Clock()
    limiter = RateLimiter(rate=2.0, burst=3, clock=clock)
    assert [limiter.acquire("a") for _ in range(3)] == [0.0, 0.0, 0.0]
    # Bucket empty: one token comes back after 1 / rate = 0.5 s.
    assert limiter.acquire("a") == pytest.approx(0.5)
    clock.now += 0.25  # half a token back: 0.25 s still to wait
    assert limiter.acquire("a") == pytest.approx(0.25)
    clock.now += 0.25
    assert limiter.acquire("a") == 0.0
    assert limiter.acquire("a") == pytest.approx(0.5)


def test_refill_never_exceeds_the_burst():
    clock = Clock()
    limiter = RateLimiter(rate=10.0, burst=2, clock=clock)
    limiter.acquire("a")
    clock.now += 3600
    assert [limiter.acquire("a") for _ in range(3)][:2] == [0.0, 0.0]
    assert limiter.acquire("a") > 0


def test_keys_are_independent():
    clock = Clock()
    limiter = RateLimiter(rate=1.0, burst=1, clock=clock)
    assert limiter.acquire("a") == 0.0
    assert limiter.acquire("a") == pytest.approx(1.0)
    assert limiter.acquire("b") == 0.0


def test_charge_goes_into_debt_and_wait_time_does_not_take():
    clock = Clock()
    limiter = RateLimiter(rate=1.0, burst=2, clock=clock)
    for _ in range(4):
        limiter.charge("ip")
    # 2 - 4 = -2 tokens: three seconds until the balance reaches one token.
    assert limiter.wait_time("ip") == pytest.approx(3.0)
    assert limiter.wait_time("ip") == pytest.approx(3.0)
    clock.now += 3.0
    assert limiter.wait_time("ip") == 0.0


def test_zero_rate_disables():
    limiter = RateLimiter(rate=0.0, burst=1)
    assert not limiter.enabled
    assert all(limiter.acquire("a") == 0.0 for _ in range(100))


def test_least_recently_used_keys_are_dropped_beyond_the_cap():
    clock = Clock()
    limiter = RateLimiter(rate=1.0, burst=1, max_keys=2, clock=clock)
    limiter.acquire("a")
    limiter.acquire("b")
    limiter.acquire("c")  # "a" is dropped: it starts again with a full bucket
    assert limiter.acquire("a") == 0.0
    assert limiter.acquire("c") == pytest.approx(1.0)


@pytest.mark.parametrize(("burst", "max_keys", "name"), [(0, 10, "burst"), (1, 0, "max_keys")])
def test_bad_arguments_are_named(burst, max_keys, name):
    with pytest.raises(ValueError, match=name):
        RateLimiter(rate=1.0, burst=burst, max_keys=max_keys)
