"""``/v1/policies``: named, versioned gate policies (admin to write, read to read)."""

from __future__ import annotations

from typing import Annotated, Any

from fastapi import APIRouter, Depends, Query, Request
from starlette.concurrency import run_in_threadpool
from starlette.responses import Response

from service.ingest import load_json
from service.store.port import Store
from service.store.records import StoredPolicy

from ..auth import require
from ..body import read_body, require_json
from ..deps import get_store
from ..errors import ApiError
from ..httputil import MAX_INT, json_body_doc, json_response, problem_docs
from ..policy_lookup import (
    BUILTIN_DEFAULT,
    NAME_PATTERN,
    builtin_default,
    policy_from_document,
    valid_name,
)
from ..schemas import PolicyList, StoredPolicyOut

router = APIRouter(prefix="/v1/policies", tags=["policies"])
MAX_POLICY_BYTES = 1024 * 1024


def _builtin_out() -> dict[str, Any]:
    policy = builtin_default()
    return {
        "name": policy.name,
        "version": policy.version,
        "created_at": None,
        "builtin": True,
        "document": policy.to_dict(),
    }


def _out(stored: StoredPolicy) -> dict[str, Any]:
    return {**stored.to_dict(), "builtin": False}


def _create(store: Store, doc: dict[str, Any]) -> StoredPolicy:
    name = doc.get("name")
    if not isinstance(name, str) or not valid_name(name):
        raise ApiError(
            422,
            "name: a policy needs a name of letters, digits, '.', '_' or '-' "
            "(at most 100, starting with a letter or digit)",
            errors=[{"loc": "name", "message": f"must match {NAME_PATTERN}"}],
        )
    # The store assigns the version; the gate validates the rest.
    candidate = {k: v for k, v in doc.items() if k != "version"}
    policy = policy_from_document(candidate, loc="")
    document = policy.to_dict()
    document.pop("version", None)
    document["name"] = name
    first = 2 if name == BUILTIN_DEFAULT else 1  # the built-in default is version 1
    stored = store.save_policy(name=name, document=document, first_version=first)
    policy_from_document(stored.document, loc="")  # what is stored must load back
    return stored


@router.post(
    "",
    status_code=201,
    response_model=StoredPolicyOut,
    summary="Store a policy: a new name starts at version 1, an existing one gets version + 1",
    responses=problem_docs(400, 401, 403, 413, 415, 422),
    openapi_extra=json_body_doc("PolicyDocument"),
)
async def post_policy(
    request: Request,
    principal: Annotated[Any, Depends(require("admin"))],
    store: Annotated[Store, Depends(get_store)],
) -> Response:
    require_json(request)
    raw = await read_body(request, MAX_POLICY_BYTES)
    doc = load_json(raw)
    if not isinstance(doc, dict):
        raise ApiError(
            422,
            "body must be a policy object",
            errors=[{"loc": "body", "message": "must be a JSON object"}],
        )
    stored = await run_in_threadpool(_create, store, doc)
    return json_response(
        _out(stored),
        status=201,
        headers={"Location": f"/v1/policies/{stored.name}?version={stored.version}"},
    )


@router.get(
    "",
    response_model=PolicyList,
    summary="The newest version of every policy",
    responses=problem_docs(401, 403),
)
def list_policies(
    principal: Annotated[Any, Depends(require("read"))],
    store: Annotated[Store, Depends(get_store)],
) -> Response:
    stored = store.list_policies()
    items = [_out(p) for p in stored]
    if not any(p.name == BUILTIN_DEFAULT for p in stored):
        items.insert(0, _builtin_out())
    return json_response({"items": items})


@router.get(
    "/{name}",
    response_model=StoredPolicyOut,
    summary="A policy: its newest version, or ?version=N",
    responses=problem_docs(401, 403, 404, 422),
)
def get_policy(
    name: str,
    principal: Annotated[Any, Depends(require("read"))],
    store: Annotated[Store, Depends(get_store)],
    version: Annotated[int | None, Query(ge=1, le=MAX_INT)] = None,
) -> Response:
    stored = store.get_policy(name=name, version=version)
    if stored is not None:
        return json_response(_out(stored))
    if name == BUILTIN_DEFAULT and version in (None, 1):
        return json_response(_builtin_out())
    what = f"policy {name!r}" + (f" version {version}" if version is not None else "")
    raise ApiError(404, f"no {what}")
