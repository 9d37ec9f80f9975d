"""Slow and idle clients against the real server: a request head that trickles in is answered
408 and closed after the head timeout, an idle keep-alive connection is closed, a body that
trickles in is answered 408, and connections beyond the per-worker cap get 503 problem+json
with ``Retry-After`` while the server keeps serving others. With either HTTP parser."""

from __future__ import annotations

import json
import socket
import time

import httpx
import pytest

from tests.serverproc import Server

from .conftest import ADMIN_TOKEN

# Real server processes and clients that trickle or wait out timeouts: seconds per test.
pytestmark = pytest.mark.slow

HEAD_TIMEOUT = 1.0
KEEP_ALIVE = 1
BODY_TIMEOUT = 1.0
MAX_CONNECTIONS = 4


@pytest.fixture(scope="module", params=["h11", "httptools"])
def server(request, tmp_path_factory):
    if request.param == "httptools":
        pytest.importorskip("httptools")  # installed with uvicorn[standard]
    tmp = tmp_path_factory.mktemp("slow")
    srv = Server(
        f"sqlite:///{tmp / 'slow.db'}",
        tmp / "server.log",
        env={
            "PLUMBLINE_ADMIN_TOKEN": ADMIN_TOKEN,
            "PLUMBLINE_HEADER_READ_TIMEOUT_SECONDS": str(HEAD_TIMEOUT),
            "PLUMBLINE_KEEP_ALIVE_TIMEOUT_SECONDS": str(KEEP_ALIVE),
            "PLUMBLINE_BODY_READ_TIMEOUT_SECONDS": str(BODY_TIMEOUT),
            "PLUMBLINE_MAX_CONNECTIONS": str(MAX_CONNECTIONS),
            "PLUMBLINE_HTTP_PARSER": request.param,
        },
    )
    with srv:
        yield srv


def connect(server: Server) -> socket.socket:
    s = socket.create_connection(("127.0.0.1", server.port), timeout=10)
    return s


def read_all(s: socket.socket) -> bytes:
    out = b""
    while True:
        try:
            chunk = s.recv(65536)
        except (ConnectionResetError, TimeoutError):
            break
        if not chunk:
            break
        out += chunk
    return out


def test_a_trickling_request_head_is_cut_off(server):
    s = connect(server)
    start = time.monotonic()
    s.sendall(b"GET /healthz HTTP/1.1\r\nHost: x\r\n")
    time.sleep(0.3)
    s.sendall(b"X-Slow: 1\r\n")  # still no blank line: the head never completes
    answer = read_all(s)
    elapsed = time.monotonic() - start
    assert answer.startswith(b"HTTP/1.1 408"), answer
    assert b"application/problem+json" in answer
    assert HEAD_TIMEOUT * 0.8 <= elapsed < HEAD_TIMEOUT + 3.0


def test_a_silent_connection_is_cut_off(server):
    s = connect(server)
    start = time.monotonic()
    answer = read_all(s)
    assert answer.startswith(b"HTTP/1.1 408"), answer
    assert time.monotonic() - start < HEAD_TIMEOUT + 3.0


def test_an_idle_keep_alive_connection_is_closed(server):
    s = connect(server)
    s.sendall(b"GET /healthz HTTP/1.1\r\nHost: x\r\n\r\n")
    first = b""
    while b'{"status":"ok"}' not in first:
        chunk = s.recv(65536)
        assert chunk, first
        first += chunk
    assert first.startswith(b"HTTP/1.1 200"), first
    start = time.monotonic()
    assert read_all(s) == b""  # closed by the server, nothing more said
    assert time.monotonic() - start < KEEP_ALIVE + 3.0


def test_a_trickling_body_is_answered_408(server):
    body = json.dumps({"model": "m", "version": "1", "series": []}).encode()
    s = connect(server)
    s.sendall(
        b"POST /v1/assessments HTTP/1.1\r\nHost: x\r\nContent-Type: application/json\r\n"
        + f"Authorization: Bearer {ADMIN_TOKEN}\r\nContent-Length: {len(body)}\r\n\r\n".encode()
        + body[:5]
    )
    start = time.monotonic()
    answer = read_all(s)
    assert answer.startswith(b"HTTP/1.1 408"), answer
    assert BODY_TIMEOUT * 0.8 <= time.monotonic() - start < BODY_TIMEOUT + 3.0


def test_connections_beyond_the_cap_get_503_problem(server):
    held = [connect(server) for _ in range(MAX_CONNECTIONS + 2)]
    try:
        for s in held:
            s.sendall(b"GET /healthz")  # part of a head: each connection stays open a while
        time.sleep(0.2)
        r = httpx.get(server.url + "/healthz", timeout=5)
        assert r.status_code == 503, r.text
        assert r.headers["content-type"].startswith("application/problem+json")
        assert r.headers["retry-after"] == "1"
    finally:
        for s in held:
            s.close()
    deadline = time.monotonic() + 5
    while time.monotonic() < deadline:
        if httpx.get(server.url + "/healthz", timeout=5).status_code == 200:
            return
        time.sleep(0.1)
    raise AssertionError("the server did not recover once the connections closed")


def test_an_oversized_or_broken_head_is_400_problem(server):
    # A head that keeps growing past 16 KiB (the default) before it ends, and one that is not
    # HTTP at all.
    for head in (
        b"GET /healthz HTTP/1.1\r\nHost: x\r\nX-Big: " + b"a" * 20000,
        b"NOT HTTP AT ALL\r\n\r\n",
    ):
        s = connect(server)
        s.sendall(head)
        time.sleep(0.2)
        try:
            s.sendall(b"\r\n\r\n")
        except OSError:
            pass  # already answered and closed
        answer = read_all(s)
        assert answer.startswith(b"HTTP/1.1 400"), answer[:200]
        assert b"application/problem+json" in answer
        doc = json.loads(answer.split(b"\r\n\r\n", 1)[1])
        assert doc["status"] == 400 and doc["detail"]
