"""Slow and idle clients: the uvicorn options ``server.run`` passes, and the HTTP protocol.

An asyncio server does not tie up a worker thread per connection, but every open connection and
every request in flight holds memory and a file descriptor. These timeouts make sure no client
holds either for long:

============================== ============================================= ================
what                           setting (``PLUMBLINE_...``)                   default
============================== ============================================= ================
request head (line + headers)  ``HEADER_READ_TIMEOUT_SECONDS``               10 s, then 408
request body                   ``BODY_READ_TIMEOUT_SECONDS`` (limits.py)     60 s, then 408
idle keep-alive connection     ``KEEP_ALIVE_TIMEOUT_SECONDS``                5 s, then closed
request head size              ``MAX_HEADER_BYTES``                          16 KiB, then 400
connections + requests         ``MAX_CONNECTIONS`` (per worker)              1000, then 503
============================== ============================================= ================

uvicorn itself times out only idle keep-alive connections; a client that opens a connection and
sends its head one byte at a time would be kept for ever. The protocol classes here add the
head timeout and answer the overload ``503`` (and an unparseable head's ``400``) as
``application/problem+json``, with ``Retry-After`` on the 503, like every other error.

The protocol class reaches the worker processes by name: uvicorn starts workers by pickling its
configuration, and a class pickles as a reference. :func:`protocol_class` therefore names each
variant after its parser and timeout in milliseconds (``Guarded_httptools_10000``) and the
module makes that class again on first access in the worker. httptools, the faster parser, is
used when installed (as uvicorn would); h11 otherwise.
"""

from __future__ import annotations

import asyncio
import json
from typing import Any

import h11
from uvicorn.protocols.http.h11_impl import H11Protocol

__all__ = ["GuardedH11Protocol", "protocol_class", "uvicorn_options"]  # and the httptools one

OVERLOAD_RETRY_AFTER_SECONDS = 1
_PREFIX = "Guarded_"

_TIMEOUT_RESPONSE = (
    b"HTTP/1.1 408 Request Timeout\r\n"
    b"content-type: application/problem+json\r\n"
    b"connection: close\r\n"
)


def _timeout_response(seconds: float) -> bytes:
    body = json.dumps(
        {
            "type": "urn:plumbline:problem:request-timeout",
            "title": "Request Timeout",
            "status": 408,
            "detail": f"The request line and headers did not arrive within {seconds:g} seconds.",
        }
    ).encode()
    return _TIMEOUT_RESPONSE + b"content-length: %d\r\n\r\n" % len(body) + body


class _OverloadGuard:
    """Answer 503 problem+json when the worker holds too many connections or requests."""

    def __init__(self, app: Any, server_state: Any, limit: int) -> None:
        self.app = app
        self.server_state = server_state
        self.limit = limit

    async def __call__(self, scope: Any, receive: Any, send: Any) -> None:
        state = self.server_state
        if scope["type"] == "http" and (
            len(state.connections) > self.limit or len(state.tasks) > self.limit
        ):
            body = json.dumps(
                {
                    "type": "urn:plumbline:problem:overloaded",
                    "title": "Service Unavailable",
                    "status": 503,
                    "detail": "The server is handling as many connections as it is configured "
                    "to; retry after the number of seconds in the Retry-After header.",
                }
            ).encode()
            await send(
                {
                    "type": "http.response.start",
                    "status": 503,
                    "headers": [
                        (b"content-type", b"application/problem+json"),
                        (b"content-length", str(len(body)).encode()),
                        (b"retry-after", str(OVERLOAD_RETRY_AFTER_SECONDS).encode()),
                        (b"connection", b"close"),
                    ],
                }
            )
            await send({"type": "http.response.body", "body": body})
            return
        await self.app(scope, receive, send)


def _problem_400(msg: str, limit: int) -> bytes:
    return json.dumps(
        {
            "type": "urn:plumbline:problem:unparseable-request",
            "title": "Bad Request",
            "status": 400,
            "detail": f"{msg} The request line and headers must be valid HTTP/1.1 and at most "
            f"{limit} bytes.",
        }
    ).encode()


class _Guards:
    """What both protocol variants add: the head timer and the problem+json overload answer."""

    header_read_timeout: float = 10.0
    _head_timer: asyncio.TimerHandle | None = None
    # Set by uvicorn's protocol class that each variant below combines with this one.
    app: Any
    limit_concurrency: int | None
    loop: asyncio.AbstractEventLoop
    transport: asyncio.Transport

    def _install_guard(self, server_state: Any) -> None:
        if self.limit_concurrency is not None:
            self.app = _OverloadGuard(self.app, server_state, self.limit_concurrency)
            self.limit_concurrency = None

    def _arm_head_timer(self) -> None:
        if self._head_timer is None:
            self._head_timer = self.loop.call_later(self.header_read_timeout, self._head_expired)

    def _disarm_head_timer(self) -> None:
        if self._head_timer is not None:
            self._head_timer.cancel()
            self._head_timer = None

    def _head_expired(self) -> None:
        self._head_timer = None
        if self.transport.is_closing() or not self._head_pending():
            return
        self.transport.write(_timeout_response(self.header_read_timeout))
        self.transport.close()

    def _head_pending(self) -> bool:  # pragma: no cover - each variant says
        raise NotImplementedError


class GuardedH11Protocol(_Guards, H11Protocol):
    """uvicorn's h11 protocol with a timeout on the request head and a problem+json 503."""

    def __init__(self, config: Any, server_state: Any, *args: Any, **kwargs: Any) -> None:
        super().__init__(config, server_state, *args, **kwargs)
        self._install_guard(server_state)

    def _head_pending(self) -> bool:
        return self.conn.their_state is h11.IDLE

    def send_400_response(self, msg: str) -> None:
        """A request h11 cannot parse (or a head over ``max_header_bytes``): problem+json."""
        body = _problem_400(msg, self.config.h11_max_incomplete_event_size or 16384)
        headers = [
            (b"content-type", b"application/problem+json"),
            (b"connection", b"close"),
            (b"content-length", str(len(body)).encode()),
        ]
        try:
            self.transport.write(
                self.conn.send(
                    h11.Response(status_code=400, headers=headers, reason=b"Bad Request")
                )
            )
            self.transport.write(self.conn.send(h11.Data(data=body)))
            self.transport.write(self.conn.send(h11.EndOfMessage()))
        except h11.LocalProtocolError:
            pass
        self.transport.close()

    def connection_made(self, transport: asyncio.Transport) -> None:  # type: ignore[override]
        super().connection_made(transport)
        self._arm_head_timer()

    def data_received(self, data: bytes) -> None:
        super().data_received(data)
        if self.transport.is_closing():
            self._disarm_head_timer()
        elif self.conn.their_state is h11.IDLE:
            # Part of a request head has arrived (or none yet, after a keep-alive pause).
            self._arm_head_timer()
        else:
            self._disarm_head_timer()

    def on_response_complete(self) -> None:
        # Between requests the keep-alive timeout applies, not the head timeout.
        self._disarm_head_timer()
        super().on_response_complete()

    def connection_lost(self, exc: Exception | None) -> None:
        self._disarm_head_timer()
        super().connection_lost(exc)


try:
    from uvicorn.protocols.http.httptools_impl import HttpToolsProtocol
except ImportError:  # pragma: no cover - httptools comes with uvicorn[standard]
    HttpToolsProtocol = None  # type: ignore[assignment,misc]

if HttpToolsProtocol is not None:

    class GuardedHttpToolsProtocol(_Guards, HttpToolsProtocol):
        """uvicorn's httptools protocol (the faster parser) with the same guards, plus the
        head size limit, which httptools does not have of its own."""

        max_header_bytes: int = 16384

        def __init__(self, config: Any, server_state: Any, *args: Any, **kwargs: Any) -> None:
            super().__init__(config, server_state, *args, **kwargs)
            self._install_guard(server_state)
            self.max_header_bytes = config.h11_max_incomplete_event_size or 16384
            self._in_head = True
            self._head_bytes = 0

        def _head_pending(self) -> bool:
            return self._in_head

        def send_400_response(self, msg: str) -> None:
            body = _problem_400(msg, self.max_header_bytes)
            self.transport.write(
                b"HTTP/1.1 400 Bad Request\r\ncontent-type: application/problem+json\r\n"
                b"connection: close\r\ncontent-length: %d\r\n\r\n" % len(body) + body
            )
            self.transport.close()

        def connection_made(self, transport: asyncio.Transport) -> None:  # type: ignore[override]
            super().connection_made(transport)
            self._arm_head_timer()

        def data_received(self, data: bytes) -> None:
            if self._in_head:
                self._head_bytes += len(data)
            super().data_received(data)
            if (
                self._in_head
                and self._head_bytes > self.max_header_bytes
                and not self.transport.is_closing()
            ):
                # The head is still not complete and already over the limit.
                self._disarm_head_timer()
                self.send_400_response("Request head too large.")

        def on_message_begin(self) -> None:
            super().on_message_begin()
            self._in_head = True
            self._head_bytes = 0
            self._arm_head_timer()

        def on_headers_complete(self) -> None:
            self._in_head = False
            self._disarm_head_timer()
            size = len(self.url) + sum(len(k) + len(v) + 4 for k, v in self.headers)
            if size > self.max_header_bytes:
                # Raised inside the parser: uvicorn answers 400 (send_400_response above).
                raise ValueError("request head too large")
            super().on_headers_complete()

        def on_response_complete(self) -> None:
            self._disarm_head_timer()
            super().on_response_complete()

        def connection_lost(self, exc: Exception | None) -> None:
            self._disarm_head_timer()
            super().connection_lost(exc)


def protocol_class(header_read_timeout: float, parser: str = "auto") -> type[asyncio.Protocol]:
    """The protocol class with this head timeout, under a name that pickles. ``parser``:
    ``auto`` (httptools when installed, as uvicorn would pick, else h11), ``h11`` or
    ``httptools``."""
    millis = max(1, round(header_read_timeout * 1000))
    kind = parser if parser != "auto" else ("httptools" if HttpToolsProtocol is not None else "h11")
    if kind not in _BASES:
        raise ValueError(
            f"http_parser {parser!r} is not available here; use one of {sorted(_BASES)} or auto"
        )
    return _variant(f"{_PREFIX}{kind}_{millis}")


_VARIANTS: dict[str, type[asyncio.Protocol]] = {}
_BASES: dict[str, Any] = {"h11": GuardedH11Protocol}
if HttpToolsProtocol is not None:
    _BASES["httptools"] = GuardedHttpToolsProtocol


def _variant(name: str) -> type[asyncio.Protocol]:
    cls = _VARIANTS.get(name)
    if cls is None:
        kind, _, millis = name[len(_PREFIX) :].partition("_")
        cls = type(name, (_BASES[kind],), {"header_read_timeout": int(millis) / 1000})
        cls.__module__ = __name__
        cls.__qualname__ = name
        _VARIANTS[name] = cls
    return cls


def __getattr__(name: str) -> Any:
    kind, _, millis = name[len(_PREFIX) :].partition("_")
    if name.startswith(_PREFIX) and kind in _BASES and millis.isdigit():
        return _variant(name)
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")


def uvicorn_options(settings: Any) -> dict[str, Any]:
    """Keyword arguments for ``uvicorn.run`` that bound what slow or idle clients can hold."""
    return {
        "http": protocol_class(settings.header_read_timeout_seconds, settings.http_parser),
        "timeout_keep_alive": settings.keep_alive_timeout_seconds,
        "h11_max_incomplete_event_size": settings.max_header_bytes,
        "limit_concurrency": settings.max_connections,
    }
