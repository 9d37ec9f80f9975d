"""``/v1/assessments``: submit an assessment, list them, read one and its per-series rows."""

from __future__ import annotations

import time
from datetime import datetime
from typing import Annotated, Any
from urllib.parse import urlencode

import orjson
from fastapi import APIRouter, Depends, Query, Request
from pydantic import BeforeValidator
from starlette.concurrency import run_in_threadpool
from starlette.responses import Response

from service.results import SeriesTable
from service.settings import Settings
from service.store.port import Store
from service.store.records import StoredAssessment

from .. import assessing, jobs, series_export, series_view
from ..auth import authorize, require
from ..body import (
    ARROW_STREAM,
    PARQUET,
    columnar_kind,
    is_csv,
    is_json,
    media_type,
    read_upload,
)
from ..csvout import wants_csv
from ..deps import Services, get_services, get_settings, get_store
from ..errors import ApiError
from ..gcpause import paused_gc
from ..httputil import (
    CSV,
    JSON,
    as_utc,
    conditional,
    decode_cursor,
    encode_cursor,
    json_body_doc,
    problem_docs,
)
from ..overview import list_csv
from ..schemas import (
    AssessmentDocument,
    AssessmentPage,
    CheckStatus,
    Job,
    SeriesRowPage,
    Verdict,
)
from ..spool import read_all

router = APIRouter(prefix="/v1/assessments", tags=["assessments"])

_PROBLEMS = problem_docs(400, 401, 403, 409, 413, 415, 422)
_READ_PROBLEMS = problem_docs(401, 403, 404, 422)
MAX_KEY_LENGTH = 200
INLINE_BODY_BYTES = 64 * 1024


def _param(name: str, where: str, description: str, schema: dict[str, Any]) -> dict[str, Any]:
    return {
        "name": name,
        "in": where,
        "required": False,
        "description": description,
        "schema": schema,
    }


# Read by the endpoint itself (cheaper than the framework's per-request parameter solving).
POST_PARAMETERS = [
    _param(
        "store",
        "query",
        "false: compute without storing (then id is null); default true",
        {"type": "boolean", "default": True},
    ),
    _param(
        "Idempotency-Key",
        "header",
        "a repeat with the same key and body returns the stored "
        "result (200); with another body, 409",
        {"type": "string", "maxLength": 200},
    ),
    _param(
        "Prefer",
        "header",
        "respond-async (RFC 7240): answer 202 with a job at once and assess in the background "
        "(not with store=false, which is answered at once)",
        {"type": "string", "examples": ["respond-async"]},
    ),
    series_view.PARAMETER,
    _param("model", "query", "CSV uploads: the model name", {"type": "string"}),
    _param("version", "query", "CSV uploads: the model version", {"type": "string"}),
    _param(
        "policy", "query", "CSV uploads: a stored policy name (name or name@N)", {"type": "string"}
    ),
    _param(
        "season_length",
        "query",
        "CSV uploads: seasonal period, default 1",
        {"type": "integer", "minimum": 1},
    ),
    _param(
        "model_params",
        "query",
        "CSV uploads: parameters the model estimated, default 0",
        {"type": "integer", "minimum": 0},
    ),
    _param(
        "level",
        "query",
        "CSV uploads: nominal level of the holdout intervals",
        {"type": "number", "exclusiveMinimum": 0, "exclusiveMaximum": 1},
    ),
    _param(
        "baseline",
        "query",
        "CSV uploads: compare the holdout with this stored version of the model, or "
        "latest-pass (the JSON body's baseline.version)",
        {"type": "string", "minLength": 1, "maxLength": 200},
    ),
    _param(
        "burn_in",
        "query",
        "CSV uploads: periods left out at the start of every series, default 0",
        {"type": "integer", "minimum": 0},
    ),
]
_TRUE = frozenset({"true", "1", "yes", "on"})
_FALSE = frozenset({"false", "0", "no", "off"})


def _store_flag(value: str | None) -> bool:
    if value is None or value.lower() in _TRUE:
        return True
    if value.lower() in _FALSE:
        return False
    raise ApiError(
        422,
        "store must be true or false",
        errors=[{"loc": "query.store", "message": "must be true or false"}],
    )


def _iso_only(value: Any) -> Any:
    """Refuse bare numbers, which pydantic would read as Unix seconds: ISO 8601 only."""
    if isinstance(value, str):
        try:
            float(value)  # "5", "1.5", "7e-37": pydantic would take these as Unix seconds
        except ValueError:
            return value
        raise ValueError("must be an ISO 8601 date-time, e.g. 2026-11-30T00:00:00Z")
    return value


IsoDatetime = Annotated[datetime, BeforeValidator(_iso_only)]


def _idempotency_key(value: str | None) -> str | None:
    if value is None:
        return None
    key = value.strip()
    if not key or len(key) > MAX_KEY_LENGTH or not key.isprintable():
        raise ApiError(
            422,
            "Idempotency-Key must be 1 to 200 printable characters",
            errors=[
                {
                    "loc": "header.Idempotency-Key",
                    "message": "must be 1 to 200 printable characters",
                }
            ],
        )
    return key


@router.post(
    "",
    status_code=201,
    response_model=AssessmentDocument,
    summary="Assess a model's residuals over a fleet of series",
    responses={
        200: {
            "description": "A repeat of an Idempotency-Key with the same body (the "
            "stored result), or a store=false computation"
        },
        202: {
            "description": "With Prefer: respond-async: the assessment runs as a job; "
            "Location names it (GET /v1/jobs/{id})",
            "model": Job,
        },
        **_PROBLEMS,
    },
    openapi_extra={
        **json_body_doc("AssessmentBody", csv=True, columnar=True),
        "parameters": POST_PARAMETERS,
    },
)
async def post_assessment(
    request: Request,
    store: Annotated[Store, Depends(get_store)],
    settings: Annotated[Settings, Depends(get_settings)],
    services: Annotated[Services, Depends(get_services)],
) -> Response:
    """Body: JSON (the shape in the contract), or the long format as ``text/csv``, an Arrow IPC
    stream or Parquet, with the model, version, policy, season_length, model_params, level,
    baseline and burn_in as query parameters. ``series`` sizes the answer (all, flagged or
    none)."""
    # The hottest endpoint checks its token directly, with the store, settings and services it
    # is given: a dependency of its own costs more than the check itself (the other endpoints
    # use the same check as the ``require`` dependency).
    await authorize(request, "submit", settings=settings, store=store, cache=services.token_cache)
    kind_raw = media_type(request)
    if is_json(kind_raw):
        kind = "json"
    elif is_csv(kind_raw):
        kind = "csv"
    elif (columnar := columnar_kind(kind_raw)) is not None:
        kind = columnar
    else:
        raise ApiError(
            415,
            "Content-Type must be application/json, text/csv, "
            f"{ARROW_STREAM} or {PARQUET}, got {kind_raw[:100] or 'none'}",
        )
    keep = _store_flag(request.query_params.get("store"))
    shown = series_view.shown_of(request.query_params)
    key = _idempotency_key(request.headers.get("idempotency-key"))
    # A big body is a temporary file here (service/api/spool.py), not bytes.
    upload = await read_upload(request, settings.max_body_bytes)
    params = {k: v for k, v in request.query_params.items() if k not in ("store", "series")}
    # The fingerprint matters only to an Idempotency-Key (its replay and its stored row).
    digest = None
    if key is not None and keep:
        hashed = (kind, params if kind != "json" else {}, upload)
        digest = (
            assessing.body_hash(*hashed)
            if isinstance(upload, bytes)
            else await run_in_threadpool(assessing.body_hash, *hashed)
        )

    if keep and jobs.prefers_async(request.headers.get("prefer")):  # a background job: 202
        return await jobs.respond_async(
            store,
            settings,
            services,
            kind=kind,
            body=upload,
            params=params,
            key=key,
            digest=digest,
        )
    body = upload if isinstance(upload, bytes) else await run_in_threadpool(read_all, upload)

    def replayed() -> assessing.Outcome | None:
        if digest is not None:
            return assessing.replay(store, key, digest, shown)  # type: ignore[arg-type]
        return None

    def job() -> assessing.Job:
        clock = time.perf_counter()
        req = assessing.parse(kind, body, params, settings)
        return assessing.Job(
            req=req,
            store=keep,
            idempotency_key=key if keep else None,
            digest=digest,
            timings={"parse": time.perf_counter() - clock},
            shown=shown,
        )

    # Small bodies are parsed on the event loop (a thread hop and the lock hand-over between
    # threads would cost as much) and assessed together with the other small submissions
    # waiting at the same moment (service/api/batching.py); large ones go to the thread pool
    # so the loop keeps answering meanwhile.
    if len(body) <= INLINE_BODY_BYTES:
        outcome = replayed()
        if outcome is None:
            outcome = await services.batcher.submit(job(), store)
    else:

        def large() -> assessing.Outcome:
            with paused_gc():
                again = replayed()
                if again is not None:
                    return again
                (done,) = assessing.run_many(store, [job()])
                if isinstance(done, BaseException):
                    raise done
                return done

        outcome = await run_in_threadpool(large)
    headers: dict[str, str] = {"Server-Timing": outcome.server_timing()}
    if outcome.assessment_id is not None:
        headers["Location"] = f"/v1/assessments/{outcome.assessment_id}"
    if outcome.replayed:
        headers["Idempotent-Replayed"] = "true"
        return Response(outcome.body, status_code=200, media_type=JSON, headers=headers)
    services.metrics.assessments.labels(outcome.verdict, "true" if keep else "false").inc()
    services.metrics.series.inc(outcome.n_series)
    return Response(
        outcome.body, status_code=201 if keep else 200, media_type=JSON, headers=headers
    )


@router.get(
    "",
    response_model=AssessmentPage,
    summary="List assessments, newest first",
    responses={
        200: {"content": {"text/csv": {}}},
        304: {"description": "Not modified"},
        **_READ_PROBLEMS,
    },
)
def list_assessments(
    request: Request,
    principal: Annotated[Any, Depends(require("read"))],
    store: Annotated[Store, Depends(get_store)],
    settings: Annotated[Settings, Depends(get_settings)],
    model: str | None = None,
    version: str | None = None,
    verdict: Verdict | None = None,
    since: Annotated[
        IsoDatetime | None, Query(description="created at or after (ISO 8601)")
    ] = None,
    until: Annotated[IsoDatetime | None, Query(description="created before (ISO 8601)")] = None,
    limit: Annotated[int, Query(ge=1)] = 50,
    cursor: str | None = None,
) -> Response:
    """Summary rows (``Accept: text/csv`` for CSV). Responses carry an ``ETag``; send it back
    in ``If-None-Match`` to get 304 when nothing changed."""
    if limit > settings.page_limit_max:
        raise ApiError(
            422,
            f"limit: at most {settings.page_limit_max}",
            errors=[
                {"loc": "query.limit", "message": f"must be at most {settings.page_limit_max}"}
            ],
        )
    before = None if cursor is None else decode_cursor(cursor)
    rows = store.list_assessments(
        model=model,
        version=version,
        verdict=verdict,
        since=as_utc(since),
        until=as_utc(until),
        before_seq=before,
        limit=limit + 1,
    )
    more = len(rows) > limit
    rows = rows[:limit]
    next_cursor = encode_cursor(rows[-1].seq) if more else None
    headers = {}
    if next_cursor is not None:
        query = dict(request.query_params)
        query["cursor"] = next_cursor
        headers["Link"] = f'</v1/assessments?{urlencode(query)}>; rel="next"'
    if wants_csv(request.headers.get("accept")):
        return conditional(request, list_csv(store, rows), CSV, headers)
    body = orjson.dumps({"items": [r.to_dict() for r in rows], "next_cursor": next_cursor})
    return conditional(request, body, JSON, headers)


def _not_found(assessment_id: str) -> ApiError:
    return ApiError(404, f"no assessment with id {assessment_id!r}")


def stored_or_404(
    store: Store, assessment_id: str, *, flagged_only: bool = False
) -> StoredAssessment:
    """The stored assessment (with ``flagged_only``, only its series rows that did not pass),
    or a 404 problem naming the id."""
    found = store.get_assessment(assessment_id=assessment_id, flagged_only=flagged_only)
    if found is None:
        raise _not_found(assessment_id)
    return found


@router.get(
    "/{assessment_id}",
    response_model=AssessmentDocument,
    summary="One assessment's full result, as the POST returned it",
    responses={304: {"description": "Not modified"}, **_READ_PROBLEMS},
    openapi_extra={"parameters": [series_view.PARAMETER]},
)
def get_assessment(
    request: Request,
    assessment_id: str,
    principal: Annotated[Any, Depends(require("read"))],
    store: Annotated[Store, Depends(get_store)],
) -> Response:
    shown = series_view.shown_of(request.query_params)
    if shown == "none":  # the head alone: no series row is read (a big fleet has millions)
        head = store.assessment_head(assessment_id=assessment_id)
        if head is None:
            raise _not_found(assessment_id)
        return conditional(request, series_view.joined(head.head, (), "none"), JSON)
    if shown == "flagged":  # the rows that did not pass, picked by the database
        flagged = stored_or_404(store, assessment_id, flagged_only=True)
        return conditional(request, series_view.joined(flagged.head, flagged.series, shown), JSON)
    stored = stored_or_404(store, assessment_id)
    return conditional(request, series_view.stored_answer(stored, shown), JSON)


@router.get(
    "/{assessment_id}/series",
    response_model=SeriesRowPage,
    summary="One flat row per series and check: a JSON page, or CSV, Arrow or Parquet",
    responses={
        200: {
            "content": {
                "text/csv": {},
                series_export.ARROW: {"schema": {"type": "string", "format": "binary"}},
                series_export.PARQUET: {"schema": {"type": "string", "format": "binary"}},
            }
        },
        304: {"description": "Not modified"},
        **_READ_PROBLEMS,
    },
)
def get_series_rows(
    request: Request,
    assessment_id: str,
    principal: Annotated[Any, Depends(require("read"))],
    store: Annotated[Store, Depends(get_store)],
    settings: Annotated[Settings, Depends(get_settings)],
    check: Annotated[str | None, Query(description="only this check (a registered name)")] = None,
    status: Annotated[CheckStatus | None, Query(description="only rows with this status")] = None,
    limit: Annotated[int | None, Query(ge=1, description="JSON: rows per page")] = None,
    cursor: Annotated[str | None, Query(description="JSON: the page after this one")] = None,
) -> Response:
    """``Accept`` chooses JSON (a page of rows, with a ``next`` link), ``text/csv``,
    ``application/vnd.apache.arrow.stream`` or ``application/vnd.apache.parquet`` (every row
    asked for, with the common details as columns of their own)."""
    query = series_export.read_query(request.query_params.multi_items(), settings.page_limit_max)
    kind = series_export.negotiate(request.headers.get("accept"))
    stored = stored_or_404(store, assessment_id)
    series = SeriesTable.from_dicts([orjson.loads(s) for s in stored.series])
    rows = series_export.rows_of(assessment_id, series, query)
    if kind == series_export.JSON:
        body, next_link = series_export.page_body(assessment_id, rows, query, request.url.path)
        headers = {} if next_link is None else {"Link": f'<{next_link}>; rel="next"'}
        return conditional(request, body, JSON, headers)
    media = CSV if kind == series_export.CSV else kind
    return conditional(request, series_export.download(rows, kind), media)
