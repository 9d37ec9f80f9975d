"""``/v1/models/{model}/compare``: version ``b`` against version ``a`` on their stored
holdouts, for BI tools (JSON, or CSV by ``Accept``)."""

from __future__ import annotations

from typing import Annotated, Any

import orjson
from fastapi import APIRouter, Depends, Query, Request
from starlette.responses import Response

from service.store.port import Store

from .. import compare as comparing
from ..auth import require
from ..csvout import to_csv, wants_csv
from ..deps import get_store
from ..httputil import CSV, JSON, conditional, problem_docs
from ..schemas import Comparison

router = APIRouter(prefix="/v1/models", tags=["models"])


@router.get(
    "/{model:path}/compare",
    response_model=Comparison,
    summary="Version b against version a on their matched holdout periods (JSON or CSV)",
    responses={
        200: {"content": {"text/csv": {}}},
        304: {"description": "Not modified"},
        **problem_docs(401, 403, 404, 422),
    },
)
def compare_versions(
    request: Request,
    model: str,
    principal: Annotated[Any, Depends(require("read"))],
    store: Annotated[Store, Depends(get_store)],
    a: Annotated[
        str,
        Query(description="the version compared with (the baseline), or latest-pass"),
    ],
    b: Annotated[str, Query(description="the version assessed against it")],
) -> Response:
    """Both versions' latest stored assessments: ``a``'s holdout matched to ``b``'s (series by
    id, periods by timestamp when both have them, else by position), ``b``'s assessed against
    it by the ``baseline_accuracy`` check under ``b``'s policy. Per series and for the fleet;
    ``Accept: text/csv`` gives one row per series. Carries an ``ETag``."""
    comparing.check_params(request.query_params)
    body = comparing.compare(store, model, a, b)
    if wants_csv(request.headers.get("accept")):
        header, rows = comparing.csv_rows(body)
        return conditional(request, to_csv(header, rows), CSV)
    return conditional(request, orjson.dumps(body, option=orjson.OPT_SERIALIZE_NUMPY), JSON)
