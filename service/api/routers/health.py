"""``/healthz`` (the process answers), ``/readyz`` (the database answers), ``/metrics``."""

from __future__ import annotations

from fastapi import APIRouter, Request
from sqlalchemy.exc import SQLAlchemyError
from starlette.responses import Response

from service.store.migrate import current_revision, head_revision

from ..availability import RETRY_AFTER_SECONDS, probe_database
from ..errors import problem
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
def readyz(request: Request) -> Response:
    engine = request.app.state.engine
    try:
        probe_database(engine)
        revision = current_revision(engine)
    except SQLAlchemyError as exc:
        return problem(
            503,
            f"database unreachable: {type(exc).__name__}",
            headers={"Retry-After": str(RETRY_AFTER_SECONDS)},
        )
    needed = head_revision()
    if revision != needed:
        return problem(
            503,
            f"database schema is at revision {revision or 'none'}, this build "
            f"needs {needed}: run 'plumbline db upgrade'",
        )
    return json_response(
        {"status": "ready", "database": engine.dialect.name, "schema_revision": revision}
    )


@router.get(
    "/metrics", summary="Prometheus text format", responses={200: {"content": {"text/plain": {}}}}
)
async def metrics(request: Request) -> Response:
    m = request.app.state.metrics  # rendering is in-memory work: on the event loop too
    return Response(m.render(), media_type=m.content_type)
