"""Prometheus metrics: requests, latencies and assessments by verdict, per app instance.

Each app has its own registry (tests build many apps). With several worker processes each
process counts its own requests; scrape them one by one or run one worker per container.
"""

from __future__ import annotations

import time
from typing import Any

from prometheus_client import (
    CollectorRegistry,
    Counter,
    Histogram,
    disable_created_metrics,
    generate_latest,
)
from prometheus_client.exposition import CONTENT_TYPE_LATEST

LATENCY_BUCKETS = (
    0.001,
    0.0025,
    0.005,
    0.01,
    0.025,
    0.05,
    0.1,
    0.25,
    0.5,
    1.0,
    2.5,
    5.0,
    10.0,
    30.0,
)


class Metrics:
    """The service's metric families in their own registry."""

    content_type = CONTENT_TYPE_LATEST

    def __init__(self) -> None:
        disable_created_metrics()  # the *_created series only add noise here
        self.registry = CollectorRegistry()
        self.requests = Counter(
            "plumbline_http_requests",
            "HTTP requests answered.",
            ["method", "route", "status"],
            registry=self.registry,
        )
        self.latency = Histogram(
            "plumbline_http_request_duration_seconds",
            "Time to answer an HTTP request.",
            ["method", "route"],
            buckets=LATENCY_BUCKETS,
            registry=self.registry,
        )
        self.assessments = Counter(
            "plumbline_assessments",
            "Assessments computed, by verdict and whether stored.",
            ["verdict", "stored"],
            registry=self.registry,
        )
        self.series = Counter(
            "plumbline_series_assessed",
            "Series assessed.",
            registry=self.registry,
        )
        self.batch_size = Histogram(
            "plumbline_submissions_per_pass",
            "Small submissions assessed together in one pass of the statistics core.",
            buckets=(1, 2, 4, 8, 16, 32, 64, 128, 256),
            registry=self.registry,
        )

    def render(self) -> bytes:
        return generate_latest(self.registry)


class MetricsMiddleware:
    """Pure ASGI middleware timing every HTTP request by its route template."""

    def __init__(self, app: Any, metrics: Metrics) -> None:
        self.app = app
        self.metrics = metrics

    async def __call__(self, scope: dict[str, Any], receive: Any, send: Any) -> None:
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return
        start = time.perf_counter()
        status = [500]

        async def send_wrapper(message: dict[str, Any]) -> None:
            if message["type"] == "http.response.start":
                status[0] = message["status"]
            await send(message)

        try:
            await self.app(scope, receive, send_wrapper)
        finally:
            route = scope.get("route")
            template = getattr(route, "path", None) or "unmatched"
            method = scope.get("method", "")
            self.metrics.requests.labels(method, template, str(status[0])).inc()
            self.metrics.latency.labels(method, template).observe(time.perf_counter() - start)
