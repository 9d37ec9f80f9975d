"""Reading request bodies: media type, size limit (413 before the body is read whole)."""

from __future__ import annotations

from typing import IO, Any, TypeVar

from fastapi import Request
from pydantic import BaseModel, ValidationError

from service.ingest import load_json

from .errors import ApiError, validation_errors
from .spool import SCOPE_KEY

M = TypeVar("M", bound=BaseModel)


def media_type(request: Request) -> str:
    """The request's media type, lower case, without parameters ("" when absent)."""
    return request.headers.get("content-type", "").split(";", 1)[0].strip().lower()


def is_json(kind: str) -> bool:
    return kind == "application/json" or (
        kind.startswith("application/") and kind.endswith("+json")
    )


def is_csv(kind: str) -> bool:
    return kind in ("text/csv", "application/csv")


ARROW_STREAM = "application/vnd.apache.arrow.stream"
PARQUET = "application/vnd.apache.parquet"
_COLUMNAR = {
    ARROW_STREAM: "arrow",
    "application/vnd.apache.arrow.file": "arrow",
    PARQUET: "parquet",
}


def columnar_kind(kind: str) -> str | None:
    """``"arrow"`` or ``"parquet"`` for a columnar upload's media type, else ``None``."""
    return _COLUMNAR.get(kind)


async def read_body(request: Request, limit: int) -> bytes:
    """The whole body, refusing with 413 as soon as it is known to exceed ``limit`` bytes:
    from ``Content-Length`` before reading, else while streaming."""
    declared = request.headers.get("content-length")
    if declared is not None:
        try:
            size = int(declared)
        except ValueError:
            raise ApiError(400, "Content-Length is not a number") from None
        if size > limit:
            raise ApiError(
                413,
                f"request body of {size} bytes exceeds the limit of {limit} "
                "bytes (PLUMBLINE_MAX_BODY_BYTES)",
            )
    chunks: list[bytes] = []
    total = 0
    async for chunk in request.stream():
        total += len(chunk)
        if total > limit:
            raise ApiError(
                413, f"request body exceeds the limit of {limit} bytes (PLUMBLINE_MAX_BODY_BYTES)"
            )
        chunks.append(chunk)
    return b"".join(chunks)


async def read_upload(request: Request, limit: int) -> bytes | IO[bytes]:
    """The body as :func:`read_body` reads it, or, when it is big (above
    :data:`~service.api.spool.SPOOL_BYTES`), the temporary file it was spooled to (at its
    start; closed when the request ends), so that it is never held whole in memory."""
    spooled = request.scope.get(SCOPE_KEY)
    if spooled is not None:
        size = spooled.seek(0, 2)
        spooled.seek(0)
        if size > limit:
            raise ApiError(
                413, f"request body exceeds the limit of {limit} bytes (PLUMBLINE_MAX_BODY_BYTES)"
            )
        return spooled
    return await read_body(request, limit)


def require_json(request: Request) -> None:
    kind = media_type(request)
    if not is_json(kind):
        raise ApiError(415, f"expected Content-Type application/json, got {kind or 'none'}")


async def read_model(request: Request, model: type[M], limit: int) -> M:
    """Read a small JSON body (415/413/400 as due) and validate it with ``model`` (422)."""
    require_json(request)
    raw = await read_body(request, limit)
    doc: Any = load_json(raw)
    if not isinstance(doc, dict):
        raise ApiError(
            422,
            "body must be a JSON object",
            errors=[{"loc": "body", "message": "must be a JSON object"}],
        )
    try:
        return model.model_validate(doc)
    except ValidationError as exc:
        errors = validation_errors(exc.errors(), drop_body=False)
        raise ApiError(422, f"{errors[0]['loc']}: {errors[0]['message']}", errors=errors) from None
