"""``/v1/tokens``: mint and revoke bearer tokens (admin)."""

from __future__ import annotations

from typing import Annotated, Any

from fastapi import APIRouter, Depends, Request
from starlette.concurrency import run_in_threadpool
from starlette.responses import Response

from service.store.port import Store
from service.store.records import SCOPES

from ..auth import require
from ..body import read_model
from ..deps import Services, get_services, get_store
from ..errors import ApiError
from ..httputil import json_body_doc, json_response, problem_docs
from ..schemas import TokenCreated, TokenList, TokenRequest

router = APIRouter(prefix="/v1/tokens", tags=["tokens"])
MAX_TOKEN_BODY = 16 * 1024


@router.post(
    "",
    status_code=201,
    response_model=TokenCreated,
    summary="Mint a token; its secret is shown in this response only",
    responses=problem_docs(400, 401, 403, 413, 415, 422),
    openapi_extra=json_body_doc("TokenRequest"),
)
async def create_token(
    request: Request,
    principal: Annotated[Any, Depends(require("admin"))],
    store: Annotated[Store, Depends(get_store)],
) -> Response:
    wanted = await read_model(request, TokenRequest, MAX_TOKEN_BODY)
    scopes = sorted(set(wanted.scopes), key=SCOPES.index)
    record, secret = await run_in_threadpool(
        lambda: store.create_token(scopes=scopes, label=wanted.label)
    )
    return json_response(
        {
            "id": record.id,
            "token": secret,
            "scopes": list(record.scopes),
            "label": record.label,
            "created_at": record.created_at.isoformat(),
        },
        status=201,
    )


@router.get(
    "",
    response_model=TokenList,
    summary="Tokens (never their secrets)",
    responses=problem_docs(401, 403),
)
def list_tokens(
    principal: Annotated[Any, Depends(require("admin"))],
    store: Annotated[Store, Depends(get_store)],
) -> Response:
    return json_response({"items": [t.to_dict() for t in store.list_tokens()]})


@router.delete(
    "/{token_id}", status_code=204, summary="Revoke a token", responses=problem_docs(401, 403, 404)
)
def revoke_token(
    token_id: str,
    principal: Annotated[Any, Depends(require("admin"))],
    store: Annotated[Store, Depends(get_store)],
    services: Annotated[Services, Depends(get_services)],
) -> Response:
    if not store.revoke_token(token_id=token_id):
        raise ApiError(404, f"no live token with id {token_id!r}")
    services.token_cache.forget(token_id)
    return Response(status_code=204)
