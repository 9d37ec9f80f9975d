"""A busy server (429 with Retry-After, or 503) is waited out, within the retry budget, with
the same Idempotency-Key; only real input errors exit 2."""

from __future__ import annotations

import json
import signal
import time
from datetime import UTC, datetime

import httpx
import pytest
from cli_helpers import SMALL_BODY, FakeServer, problem, result_json
from fastapi.testclient import TestClient

from service.api.app import create_app
from service.client import PlumblineClient, RequestRejected, ServerBusy, retry_after_seconds
from service.settings import Settings
from tests.serverproc import Server

URL = "http://plumbline.test"
ADMIN = "test-admin-token-0123456789"


def busy(seconds: str) -> httpx.Response:
    body = {"type": "about:blank", "title": "Too Many Requests", "status": 429, "detail": "slow"}
    return httpx.Response(
        429,
        content=json.dumps(body),
        headers={"Content-Type": "application/problem+json", "Retry-After": seconds},
    )


def make(server: FakeServer, **kwargs) -> tuple[PlumblineClient, list[float]]:
    slept: list[float] = []
    client = PlumblineClient(token="tok", http=server.client(), sleep=slept.append, **kwargs)
    return client, slept


def test_429_waits_as_asked_and_keeps_the_idempotency_key():
    server = FakeServer([busy("3"), busy("1"), httpx.Response(201, json=result_json("pass"))])
    client, slept = make(server)
    assert client.assess(SMALL_BODY).verdict == "pass"
    assert slept == [3.0, 1.0]
    keys = {r.headers["Idempotency-Key"] for r in server.requests}
    assert len(server.requests) == 3 and len(keys) == 1
    assert {r.content for r in server.requests} == {server.requests[0].content}


def test_retry_after_as_an_http_date():
    # RFC 9110 section 10.2.3's own example value, read one minute before that time.
    now = datetime(1999, 12, 31, 23, 58, 59, tzinfo=UTC)
    assert retry_after_seconds("Fri, 31 Dec 1999 23:59:59 GMT", now=now) == 60.0
    assert (
        retry_after_seconds("Fri, 31 Dec 1999 23:59:59 GMT", now=datetime(2000, 1, 2, tzinfo=UTC))
        == 0.0
    )
    assert retry_after_seconds("120") == 120.0
    assert retry_after_seconds("soon") is None and retry_after_seconds(None) is None


def test_an_http_date_is_waited_out():
    # A date already past: retried at once (0 s), not after the backoff.
    server = FakeServer(
        [busy("Fri, 31 Dec 1999 23:59:59 GMT"), httpx.Response(201, json=result_json("warn"))]
    )
    client, slept = make(server, backoff=5.0)
    assert client.assess(SMALL_BODY).verdict == "warn"
    assert slept == [0.0]


def test_still_busy_after_every_retry_is_server_busy_not_a_rejection():
    server = FakeServer([busy("2")])
    client, slept = make(server, retries=2)
    with pytest.raises(ServerBusy) as info:
        client.assess(SMALL_BODY)
    assert not isinstance(info.value, RequestRejected)
    assert len(server.requests) == 3 and slept == [2.0, 2.0]
    assert info.value.status == 429 and info.value.retry_after == 2.0
    assert "after 3 attempts; it asked to wait 2s" in str(info.value)


def test_a_wait_beyond_max_retry_after_gives_up_at_once():
    server = FakeServer([busy("3600")])
    client, slept = make(server, max_retry_after=60.0)
    with pytest.raises(ServerBusy) as info:
        client.assess(SMALL_BODY)
    assert len(server.requests) == 1 and slept == []
    assert "asked to wait 3600s, longer than this client waits (60s)" in str(info.value)


def test_cli_exits_3_when_still_rate_limited_and_2_on_a_real_input_error(cli, tmp_path):
    path = tmp_path / "request.json"
    path.write_text(json.dumps(SMALL_BODY))
    server = FakeServer([busy("0")])
    run = cli("assess", str(path), "--server", URL, "--retries", "1", http=server.client())
    assert run.code == 3, run.err
    lines = run.err.strip().splitlines()
    assert lines[0] == "plumbline: server answered 429; retry 1 in 0.0s"
    assert lines[-1].startswith("plumbline: error: server busy (429)")
    refused = FakeServer([problem(422, "Unprocessable Content", "series[0].fitted: bad")])
    run = cli("assess", str(path), "--server", URL, http=refused.client())
    assert run.code == 2


def test_cli_prints_a_huge_error_compactly(cli, tmp_path):
    path = tmp_path / "request.json"
    path.write_text(json.dumps(SMALL_BODY))
    errors = [{"loc": f"header.{'x' * 5000}", "message": "y" * 5000} for _ in range(10)]
    refused = FakeServer([problem(422, "Unprocessable Content", "z" * 10_000, errors=errors)])
    run = cli("assess", str(path), "--server", URL, http=refused.client())
    assert run.code == 2
    assert len(run.err.splitlines()) == 1 and len(run.err) < 1_000, len(run.err)


def test_cli_against_the_app_with_a_low_rate_limit(cli, tmp_path, database_url):
    # One request a second with no burst: the second run's first answer is a 429 asking for
    # 1 s, which the client waits out (a real wait of about a second).
    app = create_app(
        Settings(
            database_url=database_url,
            admin_token=ADMIN,
            rate_limit_per_second=1.0,
            rate_limit_burst=1,
        )
    )
    path = tmp_path / "request.json"
    path.write_text(json.dumps(SMALL_BODY))
    with TestClient(app, base_url=URL) as http:
        argv = ("assess", str(path), "--server", URL, "--token", ADMIN, "--no-store")
        first = cli(*argv, http=http)
        second = cli(*argv, http=http)
    assert first.code in (0, 1) and second.code == first.code, second.err
    assert "server answered 429; retry 1 in 1.0s" in second.err


@pytest.mark.slow
def test_cli_against_the_real_server_with_a_low_rate_limit(cli, tmp_path, database_url):
    path = tmp_path / "request.json"
    path.write_text(json.dumps(SMALL_BODY))
    env = {
        "PLUMBLINE_ADMIN_TOKEN": ADMIN,
        "PLUMBLINE_RATE_LIMIT_PER_SECOND": "1",
        "PLUMBLINE_RATE_LIMIT_BURST": "1",
    }
    server = Server(database_url, tmp_path / "server.log", env=env).start()
    try:
        argv = ("assess", str(path), "--server", server.url, "--token", ADMIN)
        runs = [cli(*argv, "--idempotency-key", f"run-{k}") for k in range(2)]
        listed = None
        for _ in range(10):
            r = httpx.get(
                f"{server.url}/v1/assessments",
                headers={"Authorization": f"Bearer {ADMIN}"},
                timeout=30,
            )
            if r.status_code == 200:
                listed = r.json()["items"]
                break
            assert r.status_code == 429
            time.sleep(float(r.headers["Retry-After"]))
    finally:
        server.kill(signal.SIGTERM)
    for run in runs:
        assert run.code in (0, 1), run.err
    assert any("server answered 429" in run.err for run in runs)
    # Each run stored its assessment exactly once.
    assert listed is not None and len(listed) == 2
