"""``/v1/checks``: the catalogue of checks, their defaults and published sources."""

from __future__ import annotations

from dataclasses import asdict
from typing import Annotated, Any

from fastapi import APIRouter, Depends, Request
from starlette.responses import Response

from service.core import CATALOGUE

from ..auth import require
from ..httputil import conditional, problem_docs
from ..policy_lookup import builtin_default
from ..schemas import CheckCatalogue

router = APIRouter(prefix="/v1/checks", tags=["checks"])


def catalogue() -> dict[str, Any]:
    """Every check with the built-in default policy's settings for it."""
    policy = builtin_default().to_dict()
    found = policy.get("checks")
    per_check: dict[str, Any] = found if isinstance(found, dict) else {}
    checks = []
    for spec in CATALOGUE:
        item = asdict(spec)
        item["details"] = list(spec.details)
        item["default_policy"] = per_check.get(spec.name)
        checks.append(item)
    return {"checks": checks, "default_policy": policy}


@router.get(
    "",
    response_model=CheckCatalogue,
    summary="The catalogue of checks",
    responses=problem_docs(401, 403),
)
def list_checks(request: Request, principal: Annotated[Any, Depends(require("read"))]) -> Response:
    import orjson

    return conditional(request, orjson.dumps(catalogue()), "application/json")
