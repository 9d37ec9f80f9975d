"""HTTP helpers shared by the routers: JSON responses, ETags, cursors, time filters."""

from __future__ import annotations

import base64
import hashlib
from datetime import UTC, datetime
from typing import Any

import orjson
from fastapi import Request
from starlette.responses import Response

from .errors import ApiError

JSON = "application/json"
MAX_INT = 2**31 - 1
"""Largest sequence number or version (the databases' INTEGER columns are 32-bit)."""
CSV = "text/csv; charset=utf-8"


def json_response(value: Any, status: int = 200, headers: dict[str, str] | None = None) -> Response:
    return Response(
        orjson.dumps(value, option=orjson.OPT_SERIALIZE_NUMPY),
        status_code=status,
        media_type=JSON,
        headers=headers,
    )


def etag_of(body: bytes) -> str:
    return '"' + hashlib.sha256(body).hexdigest()[:32] + '"'


def _matches(header: str, etag: str) -> bool:
    if header.strip() == "*":
        return True
    bare = etag.removeprefix("W/")
    return any(tag.strip().removeprefix("W/") == bare for tag in header.split(","))


def conditional(
    request: Request, body: bytes, media_type: str, headers: dict[str, str] | None = None
) -> Response:
    """``body`` with an ``ETag``; 304 (no body) when ``If-None-Match`` already has it."""
    etag = etag_of(body)
    out = {
        "ETag": etag,
        "Vary": "Accept, Authorization",
        "Cache-Control": "private, no-cache",
        **(headers or {}),
    }
    seen = request.headers.get("if-none-match")
    if seen is not None and _matches(seen, etag):
        return Response(status_code=304, headers=out)
    return Response(body, media_type=media_type, headers=out)


def encode_cursor(seq: int) -> str:
    return base64.urlsafe_b64encode(f"before:{seq}".encode()).decode().rstrip("=")


def decode_cursor(cursor: str) -> int:
    try:
        raw = base64.urlsafe_b64decode(cursor + "=" * (-len(cursor) % 4)).decode()
        prefix, _, number = raw.partition(":")
        if prefix != "before" or not number.isdigit() or int(number) > MAX_INT:
            raise ValueError(raw)
        return int(number)
    except (ValueError, UnicodeDecodeError):
        raise ApiError(
            422,
            "cursor: not a cursor this service gave out",
            errors=[
                {
                    "loc": "query.cursor",
                    "message": "invalid cursor; pass the next_cursor of a previous page unchanged",
                }
            ],
        ) from None


def as_utc(value: datetime | None) -> datetime | None:
    """Naive times are taken as UTC."""
    if value is None:
        return None
    return value.replace(tzinfo=UTC) if value.tzinfo is None else value.astimezone(UTC)


def problem_docs(*codes: int) -> dict[int | str, dict[str, Any]]:
    """OpenAPI ``responses`` entries for problem+json answers."""
    from .schemas import Problem

    return {code: {"model": Problem, "content": {"application/problem+json": {}}} for code in codes}


def json_body_doc(schema: str, *, csv: bool = False, columnar: bool = False) -> dict[str, Any]:
    """``openapi_extra`` documenting a JSON request body by a component schema name (the body
    itself is read by the endpoint, with the size limit, not by the framework); ``csv`` and
    ``columnar`` add the long layout as CSV text and as Arrow IPC stream and Parquet files."""
    content: dict[str, Any] = {
        "application/json": {"schema": {"$ref": f"#/components/schemas/{schema}"}}
    }
    if csv:
        content["text/csv"] = {"schema": {"type": "string"}}
    if columnar:
        for kind in ("application/vnd.apache.arrow.stream", "application/vnd.apache.parquet"):
            content[kind] = {"schema": {"type": "string", "format": "binary"}}
    return {"requestBody": {"required": True, "content": content}}
