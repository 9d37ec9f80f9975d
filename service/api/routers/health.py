"""``/healthz`` (the process answers), ``/readyz`` (the database answers), ``/metrics``."""

from __future__ import annotations

from fastapi import APIRouter, Request
from sqlalchemy import text
from sqlalchemy.exc import SQLAlchemyError
from starlette.responses import Response

from ..errors import problem
from ..http import json_response

router = APIRouter(tags=["health"])


@router.get("/healthz", summary="Liveness: the process answers")
def healthz() -> Response:
    return json_response({"status": "ok"})


@router.get("/readyz", summary="Readiness: the database answers",
            responses={503: {"description": "database unreachable"}})
def readyz(request: Request) -> Response:
    try:
        with request.app.state.engine.connect() as conn:
            conn.execute(text("SELECT 1"))
    except SQLAlchemyError as exc:
        return problem(503, f"database unreachable: {type(exc).__name__}")
    return json_response({"status": "ready", "database": request.app.state.engine.dialect.name})


@router.get("/metrics", summary="Prometheus text format",
            responses={200: {"content": {"text/plain": {}}}})
def metrics(request: Request) -> Response:
    m = request.app.state.metrics
    return Response(m.render(), media_type=m.content_type)
