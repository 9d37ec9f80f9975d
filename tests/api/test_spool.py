"""Big request bodies are kept in a temporary file while they arrive (service/api/spool.py):
every endpoint still gets the body it was sent."""

from __future__ import annotations

import pytest

from service.api import spool
from service.api.spool import Spool

from .helpers import ADMIN, white_noise_series


@pytest.fixture
def tiny_spool(monkeypatch):
    monkeypatch.setattr(spool, "SPOOL_BYTES", 64)


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
