"""Shared helpers for the command-line and client tests (fakes of the server, small bodies)."""

from __future__ import annotations

import json
import socket
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any

import httpx


def result_json(verdict: str, **extra: Any) -> dict[str, Any]:
    """An assessment answer in the contract's shape (for servers faked with MockTransport)."""
    status = {"pass": "pass", "warn": "warn", "fail": "fail"}[verdict]
    reasons = (
        []
        if verdict == "pass"
        else [
            {
                "check": "bias",
                "status": status,
                "series_id": "store-1",
                "message": "residuals average +2.1: the forecasts run low",
            }
        ]
    )

    def series(sid: str, verdict: str) -> dict[str, Any]:
        return {
            "id": sid,
            "verdict": verdict,
            "n_obs": 52,
            "weight": 100.0,
            "bias": None,
            "checks": [
                {
                    "name": "bias",
                    "status": verdict,
                    "statistic": 2.1,
                    "p_value": 0.01,
                    "p_adjusted": 0.02,
                    "details": {},
                    "message": "",
                }
            ],
        }

    data = {
        "id": "a-1",
        "created_at": "2026-12-01T21:00:00Z",
        "model": "m",
        "version": "1",
        "stored": True,
        "labels": {},
        "season_length": 1,
        "model_params": 0,
        "verdict": verdict,
        "policy": {"name": "default", "version": 1},
        "reasons": reasons,
        "checks": [
            {
                "name": "bias",
                "status": status,
                "series_tested": 2,
                "series_failed": int(verdict == "fail"),
                "series_warned": int(verdict == "warn"),
                "series_skipped": 0,
                "failed_share": 0.5 if verdict == "fail" else 0.0,
                "warned_share": 0.5 if verdict == "warn" else 0.0,
                "message": "",
                "fail_p_used": 0.002,
                "warn_p_used": 0.01,
            }
        ],
        "fleet": {
            "n_series": 2,
            "n_failed": int(verdict == "fail"),
            "n_warned": int(verdict == "warn"),
            "n_passed": 2 - int(verdict != "pass"),
        },
        "series": [series("store-1", verdict), series("store-2", "pass")],
    }
    data.update(extra)
    return data


def problem(status: int, title: str, detail: str = "", **extra: Any) -> httpx.Response:
    body = {"type": "about:blank", "title": title, "status": status, "detail": detail, **extra}
    return httpx.Response(
        status, content=json.dumps(body), headers={"Content-Type": "application/problem+json"}
    )


@dataclass
class FakeServer:
    """A scripted server for httpx.MockTransport: answers in turn, records every request."""

    answers: list[Callable[[httpx.Request], httpx.Response] | httpx.Response | Exception]
    requests: list[httpx.Request] = field(default_factory=list)

    def __call__(self, request: httpx.Request) -> httpx.Response:
        request.read()
        self.requests.append(request)
        answer = self.answers.pop(0) if len(self.answers) > 1 else self.answers[0]
        if isinstance(answer, Exception):
            raise answer
        if callable(answer):
            return answer(request)
        return answer

    def client(self) -> httpx.Client:
        return httpx.Client(transport=httpx.MockTransport(self), base_url="http://plumbline.test")


def closed_port() -> int:
    """A loopback port nothing listens on (bound, then released)."""
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


SMALL_BODY: dict[str, Any] = {
    "model": "m",
    "version": "1",
    "series": [{"id": "store-1", "actuals": [1.0, 2.0, 3.0], "fitted": [None, 1.5, 2.5]}],
}


class AppTransport(httpx.BaseTransport):
    """``httpx.ASGITransport`` driven from synchronous code (httpx's sync ``Client`` cannot use
    the ASGI transport itself): each request runs on an anyio event loop in a portal thread."""

    def __init__(self, app: Any) -> None:
        import anyio.from_thread

        self._asgi = httpx.ASGITransport(app=app)
        self._portal_cm = anyio.from_thread.start_blocking_portal()
        self._portal = self._portal_cm.__enter__()

    def handle_request(self, request: httpx.Request) -> httpx.Response:
        content = request.read()

        async def call() -> httpx.Response:
            forwarded = httpx.Request(
                request.method, request.url, headers=request.headers, content=content
            )
            answer = await self._asgi.handle_async_request(forwarded)
            body = await answer.aread()
            return httpx.Response(answer.status_code, headers=answer.headers, content=body)

        return self._portal.call(call)

    def close(self) -> None:
        self._portal_cm.__exit__(None, None, None)


class FlakyTransport(httpx.BaseTransport):
    """Fails the first assessments: the first reaches the app but its answer is lost (a reset
    after the server stored it), the second meets a 503 from a proxy; then it passes through."""

    def __init__(self, inner: httpx.BaseTransport) -> None:
        self.inner = inner
        self.posts: list[httpx.Request] = []

    def handle_request(self, request: httpx.Request) -> httpx.Response:
        if request.method == "POST" and request.url.path == "/v1/assessments":
            self.posts.append(request)
            if len(self.posts) == 1:
                self.inner.handle_request(request)
                raise httpx.ReadError("connection reset by peer")
            if len(self.posts) == 2:
                return httpx.Response(503, text="upstream unavailable")
        return self.inner.handle_request(request)
