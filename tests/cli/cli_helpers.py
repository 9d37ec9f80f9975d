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
    reasons = [] if verdict == "pass" else [
        {"check": "bias", "status": status, "series_id": "store-1",
         "message": "residuals average +2.1: the forecasts run low"}
    ]
    data = {
        "id": "a-1", "created_at": "2026-12-01T21:00:00Z", "model": "m", "version": "1",
        "policy": {"name": "default", "version": 1}, "verdict": verdict, "reasons": reasons,
        "checks": [{"name": "bias", "status": status, "series_tested": 2,
                    "series_failed": int(verdict == "fail"),
                    "series_warned": int(verdict == "warn"),
                    "failed_share": 0.5 if verdict == "fail" else 0.0, "message": ""}],
        "series": [{"id": "store-1", "verdict": verdict}, {"id": "store-2", "verdict": "pass"}],
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
    "model": "m", "version": "1",
    "series": [{"id": "store-1", "actuals": [1.0, 2.0, 3.0], "fitted": [None, 1.5, 2.5]}],
}
