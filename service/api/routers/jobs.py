"""``/v1/jobs``: the background assessments submitted with ``Prefer: respond-async``."""

from __future__ import annotations

from typing import Annotated, Any

import orjson
from fastapi import APIRouter, Depends, Request
from starlette.responses import Response

from service.store.port import Store

from ..auth import require
from ..deps import get_store
from ..errors import ApiError
from ..httputil import JSON, conditional, problem_docs
from ..jobs import job_view
from ..schemas import Job

router = APIRouter(prefix="/v1/jobs", tags=["jobs"])

POLL_SECONDS = 1
"""What ``Retry-After`` suggests between two looks at a job that is not finished."""


@router.get(
    "/{job_id}",
    response_model=Job,
    summary="A background assessment: state, progress, and its assessment when done",
    responses={304: {"description": "Not modified"}, **problem_docs(401, 403, 404)},
)
def get_job(
    request: Request,
    job_id: str,
    principal: Annotated[Any, Depends(require("read"))],
    store: Annotated[Store, Depends(get_store)],
) -> Response:
    """``state`` is ``queued``, ``running``, ``done`` (then ``assessment`` links the stored
    result) or ``failed`` (then ``error`` is a problem document). While it is queued or
    running the answer carries ``Retry-After``: when to look again."""
    job = store.get_job(job_id=job_id)
    if job is None:
        raise ApiError(404, f"no job with id {job_id!r}")
    headers = {} if job.state in ("done", "failed") else {"Retry-After": str(POLL_SECONDS)}
    return conditional(request, orjson.dumps(job_view(job)), JSON, headers)
