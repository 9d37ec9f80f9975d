"""Limits on the real app: per-token rate limits (429 + Retry-After), body size (413 before the
body is read), body read time (408), series count and series length (422 naming the field)."""

from __future__ import annotations

import asyncio
import json

import httpx
import pytest

from service.api.app import create_app
from service.settings import Settings

from .conftest import ADMIN, ADMIN_TOKEN, assessment, mint


def assert_problem(r: httpx.Response, status: int) -> dict:
    assert r.status_code == status, r.text
    assert r.headers["content-type"].startswith("application/problem+json")
    doc = r.json()
    assert doc["status"] == status
    assert {"type", "title", "detail"} <= doc.keys()
    return doc


def test_a_token_over_its_rate_gets_429_with_retry_after(make_client):
    client = make_client(rate_limit_per_second=0.5, rate_limit_burst=3)
    reader = {"Authorization": f"Bearer {mint(client, 'read')}"}  # the admin's 1st request
    assert [client.get("/v1/checks", headers=reader).status_code for _ in range(3)] == [200] * 3
    r = client.get("/v1/checks", headers=reader)
    doc = assert_problem(r, 429)
    # One token comes back after 1 / 0.5 = 2 s.
    assert r.headers["Retry-After"] == "2"
    assert "Retry-After" in doc["detail"]
    # Another token has a bucket of its own; probes are never limited.
    assert client.get("/v1/checks", headers=ADMIN).status_code == 200
    assert all(client.get("/healthz").status_code == 200 for _ in range(10))
    assert all(client.get("/readyz").status_code == 200 for _ in range(5))


def test_failed_authentications_are_limited_per_client(make_client):
    client = make_client(rate_limit_per_second=0.1, rate_limit_burst=3)
    codes = [
        client.get("/v1/checks", headers={"Authorization": f"Bearer guess-{i}"}).status_code
        for i in range(5)
    ]
    # Three guesses use up the client's allowance of failures; new guesses are then refused
    # before they reach the token check.
    assert codes[:3] == [401, 401, 401]
    assert codes[3:] == [429, 429]


def test_rate_limit_off_with_zero(make_client):
    client = make_client(rate_limit_per_second=0, rate_limit_burst=1)
    assert all(client.get("/v1/checks", headers=ADMIN).status_code == 200 for _ in range(30))


def _async_app(**overrides):
    return create_app(Settings(admin_token=ADMIN_TOKEN, **overrides))


@pytest.fixture
def async_settings(tmp_path):
    return {"database_url": f"sqlite:///{tmp_path / 'async.db'}"}


def test_declared_oversize_body_is_refused_before_it_is_read(async_settings):
    app = _async_app(max_body_bytes=1000, **async_settings)
    pulled = []

    async def body():
        for i in range(100):
            pulled.append(i)
            yield b"x" * 1000

    async def go():
        transport = httpx.ASGITransport(app=app)
        async with httpx.AsyncClient(transport=transport, base_url="http://t") as c:
            return await c.post(
                "/v1/assessments",
                content=body(),
                headers={
                    **ADMIN,
                    "Content-Type": "application/json",
                    "Content-Length": str(100_000),
                },
            )

    r = asyncio.run(go())
    doc = assert_problem(r, 413)
    assert "1000" in doc["detail"]
    assert pulled == []


def test_undeclared_oversize_body_is_cut_off_once_past_the_limit(async_settings):
    app = _async_app(max_body_bytes=5000, **async_settings)
    pulled = []

    async def body():
        for i in range(100):
            pulled.append(i)
            yield b"x" * 1000

    async def go():
        transport = httpx.ASGITransport(app=app)
        async with httpx.AsyncClient(transport=transport, base_url="http://t") as c:
            return await c.post(
                "/v1/assessments",
                content=body(),
                headers={**ADMIN, "Content-Type": "application/json"},
            )

    r = asyncio.run(go())
    assert_problem(r, 413)
    # 5 chunks of 1000 bytes are within the limit; the 6th passes it and nothing more is read.
    assert len(pulled) <= 7


def test_a_body_that_trickles_in_times_out_with_408(async_settings):
    app = _async_app(body_read_timeout_seconds=0.3, **async_settings)
    payload = json.dumps(assessment()).encode()

    async def body():
        yield payload[:10]
        await asyncio.sleep(2.0)
        yield payload[10:]

    async def go():
        transport = httpx.ASGITransport(app=app)
        async with httpx.AsyncClient(transport=transport, base_url="http://t") as c:
            return await c.post(
                "/v1/assessments",
                content=body(),
                headers={**ADMIN, "Content-Type": "application/json"},
            )

    r = asyncio.run(go())
    doc = assert_problem(r, 408)
    assert "0.3" in doc["detail"]


def test_a_body_in_time_is_assessed(async_settings):
    app = _async_app(body_read_timeout_seconds=5, **async_settings)
    payload = json.dumps(assessment()).encode()

    async def body():
        for i in range(0, len(payload), 512):
            await asyncio.sleep(0.01)
            yield payload[i : i + 512]

    async def go():
        transport = httpx.ASGITransport(app=app)
        async with httpx.AsyncClient(transport=transport, base_url="http://t") as c:
            return await c.post(
                "/v1/assessments",
                content=body(),
                headers={**ADMIN, "Content-Type": "application/json"},
            )

    r = asyncio.run(go())
    assert r.status_code == 201, r.text


def test_too_many_series_is_422_naming_series(make_client):
    client = make_client(max_series=3)
    r = client.post("/v1/assessments", json=assessment(n_series=4), headers=ADMIN)
    doc = assert_problem(r, 422)
    assert any(e["loc"] == "series" and "3" in e["message"] for e in doc["errors"]), doc
    assert (
        client.post("/v1/assessments", json=assessment(n_series=3), headers=ADMIN).status_code
        == 201
    )


def test_too_long_series_is_422_naming_the_array(make_client):
    client = make_client(max_series_length=50)
    r = client.post("/v1/assessments", json=assessment(n=51), headers=ADMIN)
    doc = assert_problem(r, 422)
    assert any(e["loc"] == "series[0].actuals" for e in doc["errors"]), doc


def test_too_long_csv_series_is_422(make_client):
    client = make_client(max_series_length=5)
    rows = "\n".join(f"a,{10 + i},{10 + i * 0.9}" for i in range(6))
    r = client.post(
        "/v1/assessments?model=m&version=1",
        content="series_id,actual,fitted\n" + rows,
        headers={**ADMIN, "Content-Type": "text/csv"},
    )
    doc = assert_problem(r, 422)
    assert any("series" in e["loc"] or "line" in e["loc"] for e in doc["errors"]), doc


def test_limits_are_in_the_openapi_document(make_client):
    doc = make_client().get("/openapi.json").json()
    post = doc["paths"]["/v1/assessments"]["post"]["responses"]
    for status in ("408", "413", "429", "503"):
        assert status in post, status
    assert "Retry-After" in post["429"]["headers"]
    get = doc["paths"]["/v1/assessments"]["get"]["responses"]
    assert "429" in get and "413" not in get


def test_every_documented_422_is_problem_json(make_client):
    doc = make_client().get("/openapi.json").json()
    for path, item in doc["paths"].items():
        for method, operation in item.items():
            entry = operation.get("responses", {}).get("422")
            if entry is not None and "content" in entry:
                assert "application/problem+json" in entry["content"], (method, path)
                assert "HTTPValidationError" not in str(entry["content"]), (method, path)
