"""The application factory. Nothing is built at import time: call :func:`create_app`."""

from __future__ import annotations

from contextlib import asynccontextmanager
from typing import Any

from fastapi import Depends, FastAPI

from service.cluster import job_work
from service.settings import Settings
from service.store import make_store

from . import query_check
from .auth import TokenCache, announce_first_token, ensure_first_token
from .batching import SubmissionBatcher
from .deps import Services, register
from .docs import make_app
from .errors import install_error_handlers
from .jobs import JobRunner
from .metrics import Metrics, MetricsMiddleware
from .openapi import examples_dir, install_openapi, load_examples
from .routers import (
    assessments,
    checks,
    compare,
    health,
    jobs,
    models,
    policies,
    reports,
    tokens,
)
from .security import install_hardening

DESCRIPTION = """Plumbline gates forecasting model releases on residual diagnostics over whole
fleets of series: bias, autocorrelation, changing variance, normality and holdout accuracy.
A verdict is statistical evidence, not a guarantee.

Every /v1 call needs `Authorization: Bearer <token>` with the scope it names (submit, read,
admin). Errors are `application/problem+json` (RFC 9457) naming the field at fault."""


def create_app(settings: Settings | None = None) -> FastAPI:
    """Build the service for ``settings`` (default: read from the environment).

    Makes the store, applies the migrations and mints the first admin token when no token
    exists anywhere (unless ``migrate_on_start`` is off), registers the store, the settings and
    the in-process services for the routers' dependencies (:mod:`service.api.deps`), and wires
    the routers, error mapping, metrics and OpenAPI examples.
    """
    settings = settings if settings is not None else Settings()
    store = make_store(settings.database_url)
    if settings.migrate_on_start:
        # This process owns start-up (``plumbline serve`` does both itself before its workers
        # start and turns this off for them).
        store.migrate()
        announce_first_token(ensure_first_token(store, settings))

    work = job_work(settings)
    runner = JobRunner(store, settings) if work is None else JobRunner(store, settings, work=work)

    @asynccontextmanager
    async def lifespan(_app: FastAPI) -> Any:
        runner.start()
        yield
        runner.stop(timeout=settings.job_lease_seconds)
        store.close()

    app = make_app(
        title="Plumbline",
        version="1",
        description=DESCRIPTION,
        lifespan=lifespan,
        dependencies=[Depends(query_check.reject_unknown)],
    )
    metrics = Metrics()
    services = Services(
        metrics=metrics,
        batcher=SubmissionBatcher(store, metrics),
        token_cache=TokenCache(settings.token_cache_seconds),
        jobs=runner,
    )
    register(app, store=store, settings=settings, services=services)
    install_error_handlers(app)
    for module in (assessments, jobs, reports, models, compare, checks, policies, tokens, health):
        query_check.document(module.router)
        app.include_router(module.router)
    install_openapi(app, load_examples(examples_dir(settings.examples_dir)))
    install_hardening(app, settings)
    if settings.cors_origins:
        from fastapi.middleware.cors import CORSMiddleware

        app.add_middleware(
            CORSMiddleware,
            allow_origins=settings.cors_origins,
            allow_methods=["GET", "POST", "DELETE"],
            allow_headers=[
                "Authorization",
                "Content-Type",
                "Idempotency-Key",
                "If-None-Match",
                "Prefer",
            ],
            expose_headers=["ETag", "Location", "Link", "Preference-Applied", "Retry-After"],
        )
    app.add_middleware(MetricsMiddleware, metrics=metrics)
    return app
