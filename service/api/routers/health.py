"""``/healthz`` (the process answers), ``/readyz`` (the database answers), ``/metrics``."""

from __future__ import annotations

from typing import Annotated

from fastapi import APIRouter, Depends
from starlette.responses import Response

from service.store.port import Store, StoreUnavailable

from ..deps import Services, get_services, get_store
from ..errors import RETRY_AFTER_SECONDS, problem
from ..httputil import json_response

router = APIRouter(tags=["health"])


@router.get("/healthz", summary="Liveness: the process answers")
async def healthz() -> Response:
    # On the event loop: no thread-pool hop (a fifth of a millisecond), and no wait for a
    # free thread when the pool is busy with database work.
    return json_response({"status": "ok"})


@router.get(
    "/readyz",
    summary="Readiness: the database answers, at the schema this build needs",
    responses={503: {"description": "database unreachable or schema not migrated"}},
)
def readyz(store: Annotated[Store, Depends(get_store)]) -> Response:
    try:
        ready = store.readiness()
    except StoreUnavailable as exc:
        return problem(
            503,
            f"database unreachable: {exc.kind}",
            headers={"Retry-After": str(RETRY_AFTER_SECONDS)},
        )
    if not ready.migrated:
        return problem(
            503,
            f"database schema is at revision {ready.schema_revision or 'none'}, this build "
            f"needs {ready.head_revision}: run 'plumbline db upgrade'",
        )
    return json_response(
        {"status": "ready", "database": ready.backend, "schema_revision": ready.schema_revision}
    )


@router.get(
    "/metrics", summary="Prometheus text format", responses={200: {"content": {"text/plain": {}}}}
)
async def metrics(services: Annotated[Services, Depends(get_services)]) -> Response:
    m = services.metrics  # rendering is in-memory work: on the event loop too
    return Response(m.render(), media_type=m.content_type)
