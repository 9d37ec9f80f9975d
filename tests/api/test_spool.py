"""Big request bodies are kept in a temporary file while they arrive (service/api/spool.py):
every endpoint still gets the body it was sent."""

from __future__ import annotations

import asyncio

import pytest

from service.api import spool
from service.api.limits import LimitsMiddleware
from service.api.spool import Spool

from .helpers import ADMIN, white_noise_series


@pytest.fixture
def tiny_spool(monkeypatch):
    """Spool every body over 64 bytes, and record each spool's file and whether it was closed."""
    monkeypatch.setattr(spool, "SPOOL_BYTES", 64)
    made: list[dict[str, bool]] = []
    add, close = Spool.add, Spool.close

    def recording_add(self, chunk):
        had = self.file is not None
        add(self, chunk)
        if not had and self.file is not None:
            made.append({"closed": False})
            self._record = made[-1]

    def recording_close(self):
        if getattr(self, "_record", None) is not None:
            self._record["closed"] = True
        close(self)

    monkeypatch.setattr(Spool, "add", recording_add)
    monkeypatch.setattr(Spool, "close", recording_close)
    return made


def test_a_spool_keeps_small_bodies_in_memory_and_big_ones_in_a_file():
    small = Spool(threshold=10)
    small.add(b"12345")
    assert small.done() == b"12345" and small.file is None
    big = Spool(threshold=10)
    for piece in (b"12345", b"67890", b"abc"):
        big.add(piece)
    body = big.done()
    assert not isinstance(body, bytes) and spool.read_all(body) == b"1234567890abc"
    big.close()
    assert big.file is None


def test_spooled_bodies_reach_every_endpoint(make_client, tiny_spool):
    client = make_client(job_workers=0)
    # Read by the endpoint from its file (a JSON assessment), or handed on in pieces (a
    # policy, read by the framework's own body reading).
    doc = {"model": "ovens", "version": "1", "series": [white_noise_series("s0", seed=1)]}
    r = client.post("/v1/assessments?store=false", json=doc, headers=ADMIN)
    assert r.status_code == 200, r.text
    policy = {"name": "spooled", "description": "x" * 5000, "checks": {}}
    r = client.post("/v1/policies", json=policy, headers=ADMIN)
    assert r.status_code == 201, r.text
    got = client.get("/v1/policies/spooled", headers=ADMIN).json()
    assert got["document"]["description"] == "x" * 5000
    # A CSV job is read whole from its file, as before.
    csv = "series_id,actual,fitted\n" + "".join(f"a,{v},{v + 0.5}\n" for v in range(60))
    r = client.post(
        "/v1/assessments?model=m&version=1",
        content=csv.encode(),
        headers={**ADMIN, "Content-Type": "text/csv", "Prefer": "respond-async"},
    )
    assert r.status_code == 202, r.text
    assert client.app.state.services.jobs.run_once()
    assert client.get(r.headers["location"], headers=ADMIN).json()["state"] == "done"
    # Each of the three bodies went to a file, closed when its request ended.
    assert len(tiny_spool) == 3 and all(m["closed"] for m in tiny_spool)


def test_a_body_refused_part_way_has_its_file_closed(tiny_spool):
    # A chunked body (no Content-Length) that passes the limit after it was spooled: 413,
    # and the spool's file closed then, not when it is collected.
    async def app(scope, receive, send):  # never reached
        raise AssertionError("the endpoint was called")

    middleware = LimitsMiddleware(
        app,
        rate_limit_per_second=100.0,
        rate_limit_burst=100,
        max_body_bytes=1000,
        body_read_timeout_seconds=10,
    )
    pieces = [{"type": "http.request", "body": b"x" * 100, "more_body": True}] * 20
    sent: list[dict] = []

    async def receive():
        return pieces.pop(0)

    async def send(message):
        sent.append(message)

    scope = {
        "type": "http",
        "method": "POST",
        "path": "/v1/assessments",
        "headers": [],
        "query_string": b"",
        "client": ("127.0.0.1", 1),
    }
    asyncio.run(middleware(scope, receive, send))
    assert sent[0]["status"] == 413
    assert len(tiny_spool) == 1 and tiny_spool[0]["closed"]
