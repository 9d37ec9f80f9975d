"""Request limits enforced before the application sees a request.

One pure ASGI middleware, :class:`LimitsMiddleware`, holds every limit that does not need the
request's meaning:

* **Rate limits per token.** A token bucket per bearer token (keyed by a hash of the token, never
  the token itself): ``rate_limit_per_second`` requests a second on average, bursts of up to
  ``rate_limit_burst``. A request over the limit answers ``429`` with ``Retry-After``. Requests
  without a token are counted per client address. Failed authentications (``401``) are also
  counted per client address, so guessing tokens is slowed down even when every guess is a new
  token. The buckets live in each worker process: with ``N`` workers a token can get up to ``N``
  times the configured rate in total.
* **Body size.** A ``Content-Length`` above ``max_body_bytes`` answers ``413`` before any of the
  body is read; a body sent without a length (chunked) answers ``413`` as soon as what arrived
  passes the limit.
* **Body spooling.** A body above :data:`~service.api.spool.SPOOL_BYTES` is kept in a
  temporary file while it is read (:mod:`service.api.spool`), not in memory.
* **Body read time.** The whole body must arrive within ``body_read_timeout_seconds`` of the
  first read, else ``408``: a client that trickles its upload cannot hold a request open for
  ever.

Probes (``/healthz``, ``/readyz``, ``/metrics``) are never rate limited. Series count and series
length limits need the parsed body and are enforced where the body is parsed (``422`` naming the
field).
"""

from __future__ import annotations

import asyncio
import hashlib
import json
import math
import time
from collections import OrderedDict
from collections.abc import Awaitable, Callable, MutableMapping
from dataclasses import dataclass
from http import HTTPStatus
from typing import IO, Any
from urllib.parse import parse_qsl

from .spool import PIECE_BYTES, SCOPE_KEY, Spool

__all__ = [
    "EXEMPT_PATHS",
    "LimitsMiddleware",
    "RateLimiter",
    "problem_response",
]

Scope = MutableMapping[str, Any]
Message = MutableMapping[str, Any]
Receive = Callable[[], Awaitable[Message]]
Send = Callable[[Message], Awaitable[None]]
ASGIApp = Callable[[Scope, Receive, Send], Awaitable[None]]

EXEMPT_PATHS = frozenset({"/healthz", "/readyz", "/metrics"})
"""Paths that are never rate limited (probes and scrapers)."""

MAX_TRACKED_KEYS = 10_000
"""Most buckets kept per limiter; the least recently used is dropped beyond it."""

PROBLEM_TYPES = {
    404: "not-found",
    408: "request-timeout",
    413: "body-too-large",
    422: "invalid-request",
    429: "rate-limited",
}


async def problem_response(
    send: Send,
    status: int,
    detail: str,
    *,
    headers: dict[str, str] | None = None,
    errors: list[dict[str, str]] | None = None,
) -> None:
    """Send an RFC 9457 ``application/problem+json`` response straight on the ASGI channel."""
    doc: dict[str, Any] = {
        "type": f"urn:plumbline:problem:{PROBLEM_TYPES.get(status, 'error')}",
        "title": HTTPStatus(status).phrase,
        "status": status,
        "detail": detail,
    }
    if errors is not None:
        doc["errors"] = errors
    body = json.dumps(doc).encode()
    raw = [
        (b"content-type", b"application/problem+json"),
        (b"content-length", str(len(body)).encode()),
    ]
    if status in (408, 413):
        # The rest of the body is not read: the connection cannot be reused.
        raw.append((b"connection", b"close"))
    raw.extend((k.lower().encode(), v.encode()) for k, v in (headers or {}).items())
    await send({"type": "http.response.start", "status": status, "headers": raw})
    await send({"type": "http.response.body", "body": body})


@dataclass
class _Bucket:
    tokens: float
    updated: float


class RateLimiter:
    """Token buckets keyed by a string: ``rate`` refills a second, at most ``burst`` held.

    ``acquire(key)`` takes one token and returns ``0.0`` when the request may go on, else the
    seconds until a token is available (nothing is taken then). ``rate <= 0`` disables the
    limiter. At most ``max_keys`` buckets are kept; the least recently used goes first.
    """

    def __init__(
        self,
        rate: float,
        burst: int,
        *,
        max_keys: int = MAX_TRACKED_KEYS,
        clock: Callable[[], float] = time.monotonic,
    ) -> None:
        if burst < 1:
            raise ValueError(f"burst must be at least 1, got {burst}")
        if max_keys < 1:
            raise ValueError(f"max_keys must be at least 1, got {max_keys}")
        self.rate = float(rate)
        self.burst = int(burst)
        self.max_keys = int(max_keys)
        self._clock = clock
        self._buckets: OrderedDict[str, _Bucket] = OrderedDict()

    @property
    def enabled(self) -> bool:
        return self.rate > 0

    def _bucket(self, key: str) -> _Bucket:
        now = self._clock()
        bucket = self._buckets.get(key)
        if bucket is None:
            bucket = _Bucket(tokens=float(self.burst), updated=now)
            self._buckets[key] = bucket
            while len(self._buckets) > self.max_keys:
                self._buckets.popitem(last=False)
        else:
            self._buckets.move_to_end(key)
            elapsed = max(0.0, now - bucket.updated)
            bucket.tokens = min(float(self.burst), bucket.tokens + elapsed * self.rate)
            bucket.updated = now
        return bucket

    def wait_time(self, key: str) -> float:
        """Seconds until ``key`` may make a request (``0.0``: now), without taking a token."""
        if not self.enabled:
            return 0.0
        bucket = self._bucket(key)
        return 0.0 if bucket.tokens >= 1.0 else (1.0 - bucket.tokens) / self.rate

    def acquire(self, key: str) -> float:
        """Take a token for ``key``; ``0.0`` if taken, else the seconds to wait."""
        wait = self.wait_time(key)
        if wait == 0.0 and self.enabled:
            self._buckets[key].tokens -= 1.0
        return wait

    def charge(self, key: str) -> None:
        """Take a token for ``key`` even if none is left (the balance may go below zero)."""
        if self.enabled:
            bucket = self._bucket(key)
            bucket.tokens = max(-float(self.burst), bucket.tokens - 1.0)


def _retry_after(wait: float) -> str:
    return str(max(1, math.ceil(wait)))


def _header(scope: Scope, name: bytes) -> bytes | None:
    for key, value in scope.get("headers", ()):
        if key.lower() == name:
            return value
    return None


def _token_key(scope: Scope) -> str | None:
    """A stable, non-reversible key for the request's bearer token, or ``None``."""
    value = _header(scope, b"authorization")
    if not value:
        return None
    scheme, _, credentials = value.partition(b" ")
    credentials = credentials.strip()
    if scheme.lower() != b"bearer" or not credentials:
        return None
    return "token:" + hashlib.sha256(credentials).hexdigest()[:32]


def _client_key(scope: Scope) -> str:
    client = scope.get("client")
    return "client:" + (client[0] if client else "unknown")


class LimitsMiddleware:
    """Rate limits, body size and body read time (see the module docstring)."""

    def __init__(
        self,
        app: ASGIApp,
        *,
        rate_limit_per_second: float,
        rate_limit_burst: int,
        max_body_bytes: int,
        body_read_timeout_seconds: float,
        clock: Callable[[], float] = time.monotonic,
    ) -> None:
        self.app = app
        self.requests = RateLimiter(rate_limit_per_second, rate_limit_burst, clock=clock)
        self.auth_failures = RateLimiter(rate_limit_per_second, rate_limit_burst, clock=clock)
        self.max_body_bytes = int(max_body_bytes)
        self.body_read_timeout = float(body_read_timeout_seconds)

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return
        path = scope.get("path", "")
        client = _client_key(scope)
        if path not in EXEMPT_PATHS:
            wait = self.auth_failures.wait_time(client)
            if wait == 0.0:
                wait = self.requests.acquire(_token_key(scope) or client)
            if wait > 0.0:
                await problem_response(
                    send,
                    429,
                    "Too many requests for this token (or, without one, from this client); "
                    "retry after the number of seconds in the Retry-After header.",
                    headers={"Retry-After": _retry_after(wait)},
                )
                return

        if await _refuse_nul(scope, send):
            return

        length = _header(scope, b"content-length")
        if length is not None:
            try:
                declared = int(length)
            except ValueError:
                declared = -1
            if declared > self.max_body_bytes:
                await problem_response(
                    send,
                    413,
                    f"The request body is {declared} bytes; the limit is "
                    f"{self.max_body_bytes} bytes.",
                )
                return

        replay = receive
        spool: Spool | None = None
        if scope.get("method") in ("POST", "PUT", "PATCH") or length is not None:
            spool = Spool()
            try:
                read = await self._read_body(receive, send, spool)
            except BaseException:
                spool.close()
                raise
            if not read:  # answered 413 or 408, or the client left: what arrived is dropped
                spool.close()
                return
            body = spool.done()
            if isinstance(body, bytes):
                replay = _replaying(body, receive)
            else:  # a big body: in a temporary file, which the endpoint may read itself
                scope[SCOPE_KEY] = body
                replay = _replaying_file(body, receive)
        try:
            await self._call(scope, replay, send, client)
        finally:
            if spool is not None:
                scope.pop(SCOPE_KEY, None)
                spool.close()

    async def _call(self, scope: Scope, receive: Receive, send: Send, client: str) -> None:
        if not self.auth_failures.enabled:
            await self.app(scope, receive, send)
            return

        async def watch_status(message: Message) -> None:
            if message["type"] == "http.response.start" and message["status"] == 401:
                self.auth_failures.charge(client)
            await send(message)

        await self.app(scope, receive, watch_status)

    async def _read_body(self, receive: Receive, send: Send, spool: Spool) -> bool:
        """The whole body into ``spool``; ``False`` after answering ``413`` or ``408``."""
        size = 0
        deadline = time.monotonic() + self.body_read_timeout
        while True:
            remaining = deadline - time.monotonic()
            try:
                if remaining <= 0:
                    raise TimeoutError
                # A timeout scope, not wait_for: no task is made per chunk.
                async with asyncio.timeout(remaining):
                    message = await receive()
            except TimeoutError:
                await problem_response(
                    send,
                    408,
                    f"The request body did not arrive within {self.body_read_timeout:g} seconds.",
                )
                return False
            if message["type"] == "http.disconnect":
                return False
            chunk = message.get("body", b"")
            if chunk:
                size += len(chunk)
                if size > self.max_body_bytes:
                    await problem_response(
                        send,
                        413,
                        f"The request body is over the limit of {self.max_body_bytes} bytes.",
                    )
                    return False
                spool.add(chunk)
            if not message.get("more_body", False):
                return True


async def _refuse_nul(scope: Scope, send: Send) -> bool:
    """Answer a URL that holds a NUL character (``%00``); ``True`` if it was answered.

    No stored name or id holds one (bodies are refused with 422 for it) and PostgreSQL cannot
    compare text with it: a path with NUL names nothing (404), a query parameter with NUL is
    invalid (422 naming it).
    """
    if "\x00" in scope.get("path", ""):
        await problem_response(send, 404, "No such resource: the path holds a NUL character.")
        return True
    query = scope.get("query_string", b"")
    if b"%00" not in query.lower() and b"\x00" not in query:
        return False
    errors = [
        {"loc": f"query.{name.replace(chr(0), '?')}", "message": "must not contain NUL characters"}
        for name, value in parse_qsl(query.decode("latin-1"), keep_blank_values=True)
        if "\x00" in name or "\x00" in value
    ]
    if not errors:
        return False
    await problem_response(send, 422, f"{errors[0]['loc']}: {errors[0]['message']}", errors=errors)
    return True


def _replaying_file(body: IO[bytes], receive: Receive) -> Receive:
    """A ``receive`` that gives a spooled body from its file in pieces, then defers to the
    real channel (it reads at its own offset: the endpoint may read the file too)."""
    offset = 0
    finished = False

    async def replay() -> Message:
        nonlocal offset, finished
        if finished:
            return await receive()
        body.seek(offset)
        piece = body.read(PIECE_BYTES)
        offset += len(piece)
        more = len(piece) == PIECE_BYTES
        finished = not more
        return {"type": "http.request", "body": piece, "more_body": more}

    return replay


def _replaying(body: bytes, receive: Receive) -> Receive:
    """A ``receive`` that gives ``body`` in one message, then defers to the real channel."""
    sent = False

    async def replay() -> Message:
        nonlocal sent
        if not sent:
            sent = True
            return {"type": "http.request", "body": body, "more_body": False}
        return await receive()

    return replay
