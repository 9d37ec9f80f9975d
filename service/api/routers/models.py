"""``/v1/models``: every model with its latest verdict (the estate in one poll), and
``/v1/models/{model}/verdict``: may this model ship? The latest verdict, with ``require``."""

from __future__ import annotations

from typing import Annotated, Any

import orjson
from fastapi import APIRouter, Depends, Query, Request
from starlette.responses import Response

from service.store.port import Store

from ..auth import require
from ..compare import baseline_of
from ..csvout import wants_csv
from ..deps import get_store
from ..errors import ApiError
from ..httputil import CSV, JSON, conditional, json_response, problem_docs
from ..overview import ModelList, model_rows, models_csv
from ..schemas import ModelVerdict, Verdict

router = APIRouter(prefix="/v1/models", tags=["models"])

# Which verdicts satisfy each ``require`` level.
MEETS = {"pass": frozenset({"pass"}), "warn": frozenset({"pass", "warn"})}


@router.get(
    "",
    response_model=ModelList,
    summary="Every model with its latest version, verdict and time (JSON or CSV)",
    responses={
        200: {"content": {"text/csv": {}}},
        304: {"description": "Not modified"},
        **problem_docs(401, 403, 422),
    },
)
def list_models(
    request: Request,
    principal: Annotated[Any, Depends(require("read"))],
    store: Annotated[Store, Depends(get_store)],
    verdict: Annotated[
        Verdict | None, Query(description="only models whose latest verdict is this")
    ] = None,
) -> Response:
    """One row per model, by name: its newest assessment (version, verdict, time, series
    counts, the checks that failed or warned over the fleet, labels), and how many assessments
    and versions it has. ``Accept: text/csv`` for CSV; ``ETag`` / ``If-None-Match`` gives 304
    when nothing changed, so a dashboard can poll the whole estate cheaply."""
    rows, facts = model_rows(store, store.list_models(verdict=verdict))
    if wants_csv(request.headers.get("accept")):
        return conditional(request, models_csv(rows, facts), CSV)
    return conditional(request, orjson.dumps({"items": rows}), JSON)


@router.get(
    "/{model:path}/verdict",
    response_model=ModelVerdict,
    summary="The latest verdict of a model (optionally of one version)",
    responses={
        412: {
            "model": ModelVerdict,
            "description": "require not met: the same body as 200, as problem+json",
            "content": {"application/problem+json": {}},
        },
        **problem_docs(401, 403, 404, 422),
    },
)
def latest_verdict(
    model: str,
    principal: Annotated[Any, Depends(require("read"))],
    store: Annotated[Store, Depends(get_store)],
    version: str | None = None,
    require_: Annotated[
        str | None,
        Query(
            alias="require",
            pattern="^(pass|warn)$",
            description="pass: 200 only on pass; warn: 200 on pass or warn; else 412",
        ),
    ] = None,
) -> Response:
    found = store.latest_assessment(model=model, version=version)
    if found is None:
        what = f"model {model!r}" + (f" version {version!r}" if version is not None else "")
        raise ApiError(404, f"no assessment of {what}")
    body: dict[str, Any] = {
        "model": found.model,
        "version": found.version,
        "verdict": found.verdict,
        "assessment_id": found.id,
        "created_at": found.created_at.isoformat(),
        "policy": {"name": found.policy_name, "version": found.policy_version},
    }
    compared = baseline_of(store, found.id)
    if compared is not None:
        body["baseline"] = compared
    if require_ is None:
        return json_response(body)
    met = found.verdict in MEETS[require_]
    body["require"] = require_
    body["met"] = met
    if met:
        return json_response(body)
    allowed = " or ".join(sorted(MEETS[require_], reverse=True))
    raise ApiError(
        412,
        f"the latest verdict of {model!r} version {found.version!r} is "
        f"{found.verdict!r}; require={require_} needs {allowed}",
        slug="require-not-met",
        extra=body,
    )
