"""The one place that turns every error into an RFC 9457 ``application/problem+json`` body.

Members: ``type``, ``title``, ``status``, ``detail``; validation problems add
``errors: [{"loc": "series[3].fitted", "message": "..."}]``. Anything unexpected becomes a 500
whose body names no internals (and is logged): a 5xx on any input is a bug to fix.

The store's exceptions (:mod:`service.store.port`) are mapped here too: an unavailable database
is ``503`` with ``Retry-After`` (nothing was stored: the client may retry, with the same
``Idempotency-Key``), a conflict with what is stored ``409``, any other failure of the database
a logged ``500``.
"""

from __future__ import annotations

import logging
from collections.abc import Mapping, Sequence
from http import HTTPStatus
from typing import Any

import orjson
from fastapi import FastAPI, Request
from fastapi.exceptions import RequestValidationError
from starlette.exceptions import HTTPException as StarletteHTTPException
from starlette.responses import Response

from service.core import InputError
from service.ingest import RequestInvalid, RequestUnparseable
from service.store.port import StoreConflict, StoreError, StoreUnavailable

PROBLEM_JSON = "application/problem+json"
TYPE_PREFIX = "urn:plumbline:problem:"
RETRY_AFTER_SECONDS = 5
"""What ``Retry-After`` says while the database is unavailable."""
MAX_DETAIL_CHARS = 1000
"""Longest ``detail`` or field ``message`` in a problem body; longer ones are cut (an error
quotes at most a short prefix of any input, and this bounds what a message could still copy)."""
MAX_LOC_CHARS = 200
"""Longest ``loc`` of a field error."""
INTERNAL_ERROR = "internal error: the service failed on this request; it has been logged"

log = logging.getLogger("plumbline.api")

# A short machine-readable slug per status, used in ``type``.
_SLUGS = {
    400: "unparseable-body",
    401: "unauthenticated",
    403: "forbidden",
    404: "not-found",
    405: "method-not-allowed",
    406: "not-acceptable",
    409: "conflict",
    412: "precondition-failed",
    413: "body-too-large",
    415: "unsupported-media-type",
    422: "invalid-request",
    500: "internal-error",
    503: "unavailable",
}


class ApiError(Exception):
    """An error the service means to return: status, a human detail, optional field errors."""

    def __init__(
        self,
        status: int,
        detail: str,
        *,
        errors: Sequence[Mapping[str, str]] | None = None,
        slug: str | None = None,
        title: str | None = None,
        headers: Mapping[str, str] | None = None,
        extra: Mapping[str, Any] | None = None,
    ) -> None:
        super().__init__(detail)
        self.status = status
        self.detail = detail
        self.errors = None if errors is None else [dict(e) for e in errors]
        self.slug = slug
        self.title = title
        self.headers = dict(headers or {})
        self.extra = dict(extra or {})


def problem(
    status: int,
    detail: str,
    *,
    errors: Sequence[Mapping[str, str]] | None = None,
    slug: str | None = None,
    title: str | None = None,
    headers: Mapping[str, str] | None = None,
    extra: Mapping[str, Any] | None = None,
) -> Response:
    """A problem+json response."""
    body: dict[str, Any] = {
        "type": TYPE_PREFIX + (slug or _SLUGS.get(status, f"http-{status}")),
        "title": title or HTTPStatus(status).phrase,
        "status": status,
        "detail": bounded(detail, MAX_DETAIL_CHARS),
    }
    if errors is not None:
        body["errors"] = [
            {
                "loc": bounded(str(e["loc"]), MAX_LOC_CHARS),
                "message": bounded(str(e["message"]), MAX_DETAIL_CHARS),
            }
            for e in errors
        ]
    for key, value in (extra or {}).items():
        body.setdefault(key, value)
    return Response(
        orjson.dumps(body), status_code=status, media_type=PROBLEM_JSON, headers=dict(headers or {})
    )


def bounded(text: str, limit: int) -> str:
    """``text`` cut to ``limit`` characters, saying so."""
    if len(text) <= limit:
        return text
    return text[: limit - 30] + f"... (cut; {len(text):,} characters)"


def policy_errors(exc: InputError, prefix: str = "policy") -> list[dict[str, str]]:
    """Field errors of a policy problem, located under ``prefix`` (``policy.checks.bias...``)."""
    raw = getattr(exc, "errors", None)
    items = (
        raw if isinstance(raw, list) and raw else [{"loc": exc.argument, "message": exc.message}]
    )
    out = []
    for item in items:
        loc = str(item.get("loc", "") or "")
        full = prefix if not loc else (f"{prefix}.{loc}" if prefix else loc)
        out.append({"loc": full, "message": str(item.get("message", ""))})
    return out


def _pydantic_loc(parts: Sequence[Any]) -> str:
    out = ""
    for part in parts:
        if isinstance(part, int):
            out += f"[{part}]"
        else:
            out += ("." if out else "") + str(part)
    return out or "body"


def validation_errors(
    raw: Sequence[Mapping[str, Any]], *, drop_body: bool = True
) -> list[dict[str, str]]:
    """Pydantic/FastAPI errors as ``{loc, message}`` (``body.`` dropped: locs are relative to
    the body; query and header locs keep their ``query.`` / ``header.`` prefix)."""
    out = []
    for err in raw:
        loc = list(err.get("loc", ()))
        if drop_body and loc and loc[0] == "body":
            loc = loc[1:]
        out.append({"loc": _pydantic_loc(loc), "message": str(err.get("msg", "invalid"))})
    return out


def install_error_handlers(app: FastAPI) -> None:
    """Map every exception type the service can meet to problem+json."""

    @app.exception_handler(ApiError)
    async def _api_error(_request: Request, exc: ApiError) -> Response:
        return problem(
            exc.status,
            exc.detail,
            errors=exc.errors,
            slug=exc.slug,
            title=exc.title,
            headers=exc.headers,
            extra=exc.extra,
        )

    @app.exception_handler(RequestInvalid)
    async def _request_invalid(_request: Request, exc: RequestInvalid) -> Response:
        status = 400 if isinstance(exc, RequestUnparseable) else 422
        return problem(status, exc.detail, errors=exc.errors)

    @app.exception_handler(InputError)
    async def _input_error(_request: Request, exc: InputError) -> Response:
        errors = policy_errors(exc, prefix="")
        return problem(422, f"{errors[0]['loc']}: {errors[0]['message']}", errors=errors)

    @app.exception_handler(RequestValidationError)
    async def _validation(_request: Request, exc: RequestValidationError) -> Response:
        raw = exc.errors()
        if any(e.get("type") == "json_invalid" for e in raw):
            return problem(400, "malformed JSON body", errors=validation_errors(raw))
        errors = validation_errors(raw)
        return problem(422, f"{errors[0]['loc']}: {errors[0]['message']}", errors=errors)

    @app.exception_handler(StoreUnavailable)
    async def _store_unavailable(request: Request, exc: StoreUnavailable) -> Response:
        log.warning("database unavailable on %s %s: %s", request.method, request.url.path, exc)
        return problem(
            503,
            "The database is unavailable; nothing was stored. Retry after the number of "
            "seconds in the Retry-After header (with the same Idempotency-Key).",
            slug="database-unavailable",
            headers={"Retry-After": str(RETRY_AFTER_SECONDS)},
        )

    @app.exception_handler(StoreConflict)
    async def _store_conflict(_request: Request, exc: StoreConflict) -> Response:
        return problem(409, f"the request conflicts with what is stored: {exc}")

    @app.exception_handler(StoreError)
    async def _store_error(request: Request, exc: StoreError) -> Response:
        log.error("database error on %s %s", request.method, request.url.path, exc_info=exc)
        return problem(500, INTERNAL_ERROR)

    @app.exception_handler(StarletteHTTPException)
    async def _http(_request: Request, exc: StarletteHTTPException) -> Response:
        detail = exc.detail if isinstance(exc.detail, str) else HTTPStatus(exc.status_code).phrase
        if exc.status_code == 404 and detail == "Not Found":
            detail = "no such endpoint"
        return problem(exc.status_code, detail, headers=getattr(exc, "headers", None))

    @app.exception_handler(Exception)
    async def _unexpected(request: Request, exc: Exception) -> Response:
        log.exception("unhandled error on %s %s", request.method, request.url.path)
        return problem(500, INTERNAL_ERROR)
