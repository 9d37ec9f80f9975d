"""What the routers are given: the store, the settings and the app's in-process services.

:func:`register` puts them on the app once (``create_app`` calls it); routers and the auth
dependency declare ``Depends(get_store)``, ``Depends(get_settings)`` and
``Depends(get_services)`` and never read the app's state themselves. A test (or another
deployment) swaps any of them with ``app.dependency_overrides[get_store] = ...``, and every
operation of the requests that follow, the batched writes included, uses the replacement.

The dependencies are coroutines so that the framework calls them on the event loop, without a
hop to the thread pool.
"""

from __future__ import annotations

import threading
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

from fastapi import FastAPI, Request

from service.settings import Settings
from service.store.port import Store

if TYPE_CHECKING:  # pragma: no cover - annotations only
    from .auth import TokenCache
    from .batching import SubmissionBatcher
    from .jobs import JobRunner
    from .metrics import Metrics

__all__ = ["Services", "get_services", "get_settings", "get_store", "register"]


@dataclass
class Services:
    """The app's in-process services beside the store: metrics, the batcher of small
    submissions, the runner of background jobs, the memory of verified tokens, and what the
    report pages keep once made (their chart cache and the link-signing key read from the
    store)."""

    metrics: Metrics
    batcher: SubmissionBatcher
    token_cache: TokenCache
    jobs: JobRunner | None = None
    chart_cache: Any = None
    link_secret: str | None = None
    lock: threading.Lock = field(default_factory=threading.Lock, repr=False)


def register(app: FastAPI, *, store: Store, settings: Settings, services: Services) -> None:
    """Make ``store``, ``settings`` and ``services`` what the app's dependencies return."""
    app.state.store = store
    app.state.settings = settings
    app.state.services = services


async def get_store(request: Request) -> Store:
    """The app's store."""
    return request.app.state.store


async def get_settings(request: Request) -> Settings:
    """The app's settings."""
    return request.app.state.settings


async def get_services(request: Request) -> Services:
    """The app's in-process services (metrics, batcher, token memory, report caches)."""
    return request.app.state.services
