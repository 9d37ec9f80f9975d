"""``/v1/assessments/{id}/report``: the HTML report, its series pages and signed links to them.

The report opens with a bearer token holding the ``read`` scope, or without any token through a
signed link (``?expires=...&signature=...``, see :mod:`service.links`) made by
``POST /v1/assessments/{id}/links``. A link opens that one report and its series pages; an
expired or altered link answers 403. The charts are drawn here, on request, never when an
assessment is submitted.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass
from typing import Annotated, Any
from urllib.parse import quote

import numpy as np
import orjson
from fastapi import APIRouter, Body, Depends, Query, Request
from pydantic import BaseModel, ConfigDict, Field
from starlette.concurrency import run_in_threadpool
from starlette.responses import Response

from service import links
from service.results import AssessmentDocument
from service.settings import Settings
from service.store.port import Store

from .. import query_check
from ..auth import authorize
from ..deps import Services, get_services, get_settings, get_store
from ..errors import ApiError
from ..httputil import json_response, problem_docs
from .assessments import stored_or_404

router = APIRouter(prefix="/v1/assessments", tags=["reports"])

HTML = "text/html; charset=utf-8"
LINK_PARAMS = ("expires", "signature")
LINK_SECRET_NAME = "report_links"
_PROBLEMS = problem_docs(401, 403, 404)

# Declared for the OpenAPI document; read (and checked) by _admit. Kept as text so that a
# malformed value is a refused link (403), not a validation error.
Expires = Annotated[
    str | None,
    Query(description="Signed link: expiry in Unix seconds (with signature, instead of a token)"),
]
Signature = Annotated[
    str | None,
    Query(description="Signed link: HMAC-SHA256 signature from POST /v1/assessments/{id}/links"),
]


class LinkRequest(BaseModel):
    model_config = ConfigDict(extra="forbid")

    ttl_seconds: int | None = Field(
        default=None,
        ge=1,
        description="How long the link stays valid; default and maximum: the server's "
        "link_ttl_seconds setting (7 days unless configured).",
    )


class LinkCreated(BaseModel):
    url: str
    expires_at: str
    assessment_id: str


@dataclass(frozen=True, slots=True)
class Context:
    """What a report request works with: its settings, store and the app's services."""

    settings: Settings
    store: Store
    services: Services


async def report_context(
    settings: Annotated[Settings, Depends(get_settings)],
    store: Annotated[Store, Depends(get_store)],
    services: Annotated[Services, Depends(get_services)],
) -> Context:
    return Context(settings=settings, store=store, services=services)


def link_secret(ctx: Context) -> str:
    """The key that signs links: ``PLUMBLINE_LINK_SECRET`` when set, else a random key the
    server made on first use and keeps in its database, shared by every worker and restart."""
    configured = ctx.settings.link_secret
    if configured is not None:
        secret: str | None = configured.get_secret_value()
    else:
        services = ctx.services
        secret = services.link_secret
        if not secret:
            with services.lock:
                secret = services.link_secret
                if not secret:
                    secret = ctx.store.get_or_create_secret(
                        name=LINK_SECRET_NAME, make=links.new_secret
                    )
                    services.link_secret = secret
    if secret is None or len(secret.encode()) < links.MIN_SECRET_LENGTH:
        raise ApiError(
            503,
            f"report links are not available: the link secret must be at least "
            f"{links.MIN_SECRET_LENGTH} bytes (PLUMBLINE_LINK_SECRET)",
        )
    return secret


def _chart_cache(services: Services) -> Any:
    from service.report.cache import ChartCache

    cache = services.chart_cache
    if cache is None:
        with services.lock:
            cache = services.chart_cache
            if cache is None:
                cache = services.chart_cache = ChartCache()
    return cache


async def _admit(request: Request, ctx: Context, assessment_id: str) -> str:
    """Let the request in; return the query string its in-page links must carry ('' with a
    bearer token, the link's ``expires`` and ``signature`` with a signed link)."""
    params = request.query_params
    if any(p in params for p in LINK_PARAMS):
        try:
            link = links.verify_link(
                secret=link_secret(ctx),
                assessment_id=assessment_id,
                expires=params.get("expires"),
                signature=params.get("signature"),
            )
        except links.LinkExpired as exc:
            raise ApiError(403, exc.reason, slug="link-expired", title="Link expired") from None
        except links.LinkInvalid as exc:
            raise ApiError(403, exc.reason, slug="link-invalid", title="Invalid link") from None
        query_check.check(request)  # once admitted, as for a token
        return link.query
    await _require_read(request, ctx)
    query_check.check(request)
    return ""


async def _require_read(request: Request, ctx: Context) -> None:
    await authorize(
        request,
        "read",
        settings=ctx.settings,
        store=ctx.store,
        cache=ctx.services.token_cache,
    )


def _report_path(request: Request, assessment_id: str) -> str:
    root = request.scope.get("root_path", "").rstrip("/")
    return f"{root}/v1/assessments/{quote(assessment_id, safe='')}/report"


def _html(text: str) -> Response:
    from service.report import CONTENT_SECURITY_POLICY

    return Response(
        text,
        media_type=HTML,
        headers={
            "Content-Security-Policy": CONTENT_SECURITY_POLICY,
            "X-Content-Type-Options": "nosniff",
            "Referrer-Policy": "no-referrer",
            "X-Frame-Options": "DENY",
            "Cache-Control": "private, no-store",
        },
    )


@router.get(
    "/{assessment_id}/report",
    summary="The assessment's report: a self-contained HTML page",
    response_class=Response,
    responses={200: {"content": {"text/html": {}}}, **_PROBLEMS},
)
@query_check.checked_later
async def get_report(
    request: Request,
    assessment_id: str,
    ctx: Annotated[Context, Depends(report_context)],
    expires: Expires = None,
    signature: Signature = None,
) -> Response:
    """Fleet verdict and reasons, the per-check table, the fleet bias and every series (worst
    first), each linking to its page. Bearer token with ``read``, or a signed link."""
    query = await _admit(request, ctx, assessment_id)
    base = _report_path(request, assessment_id)
    suffix = f"?{query}" if query else ""

    def work() -> str:
        from service.report import render_report
        from service.report.fleet_charts import render_fleet_charts

        stored = stored_or_404(ctx.store, assessment_id)
        assessment = AssessmentDocument.from_dict(orjson.loads(stored.to_json()))
        charts = _chart_cache(ctx.services).get_or_render(
            (assessment_id, None), lambda: render_fleet_charts(assessment)
        )
        return render_report(
            assessment,
            series_href=lambda sid: f"{base}/series/{quote(sid, safe='')}{suffix}",
            fleet_charts=charts,
        )

    return _html(await run_in_threadpool(work))


def _inputs_of(store: Store, assessment_id: str, series_id: str) -> Any:
    from service.report import SeriesInputs

    found = store.series_inputs(assessment_id=assessment_id) or []
    for s in found:
        if s.series_id == series_id:
            return SeriesInputs(
                series_id=s.series_id,
                actuals=np.asarray(s.actuals, dtype=float),
                fitted=np.asarray(s.fitted, dtype=float),
                timestamps=None if s.timestamps is None else tuple(s.timestamps),
                holdout_actuals=None
                if s.holdout_actuals is None
                else np.asarray(s.holdout_actuals, dtype=float),
                holdout_forecasts=None
                if s.holdout_forecasts is None
                else np.asarray(s.holdout_forecasts, dtype=float),
                holdout_lower=None
                if s.holdout_lower is None
                else np.asarray(s.holdout_lower, dtype=float),
                holdout_upper=None
                if s.holdout_upper is None
                else np.asarray(s.holdout_upper, dtype=float),
                level=s.holdout_level,
                holdout_timestamps=None
                if s.holdout_timestamps is None
                else tuple(s.holdout_timestamps),
                burn_in=s.burn_in,
            )
    return None


def baseline_path(store: Store, block: Any, inputs: Any) -> Any:
    """``inputs`` with the baseline's forecasts on its holdout periods (matched as the
    assessment matched them), when the assessment had a baseline whose inputs are stored."""
    from dataclasses import replace

    from .. import baseline

    if not isinstance(block, Mapping) or not inputs.has_holdout:
        return inputs
    head = store.assessment_head(assessment_id=str(block.get("assessment_id")))
    stored = store.series_inputs(assessment_id=str(block.get("assessment_id")))
    if head is None or not stored:
        return inputs
    mine = [s for s in stored if s.series_id == inputs.series_id]
    source = baseline.Source(
        requested=str(block.get("requested")), summary=head.summary, inputs=mine
    )
    n = inputs.holdout_actuals.size
    stamps = None if inputs.holdout_timestamps is None else list(inputs.holdout_timestamps)
    try:
        found = baseline.match(source, [inputs.series_id], np.array([n]), [stamps], n)
    except ApiError:  # nothing of this series matched
        return inputs
    return replace(inputs, baseline_forecasts=found.forecasts[0], baseline_label=found.version)


@router.get(
    "/{assessment_id}/report/series/{series_id:path}",
    summary="One series' page of the report, with its diagnostic charts",
    response_class=Response,
    responses={200: {"content": {"text/html": {}}}, **_PROBLEMS},
)
@query_check.checked_later
async def get_series_report(
    request: Request,
    assessment_id: str,
    series_id: str,
    ctx: Annotated[Context, Depends(report_context)],
    expires: Expires = None,
    signature: Signature = None,
) -> Response:
    """Residuals over time, residual ACF with its bounds and the Ljung-Box lags, histogram with
    the fitted normal, residuals against fitted values and, with a holdout, actuals against
    forecasts with the interval and the best benchmark. Drawn on request (and cached)."""
    query = await _admit(request, ctx, assessment_id)
    base = _report_path(request, assessment_id)
    suffix = f"?{query}" if query else ""

    def work() -> str:
        from service.report import (
            find_series,
            neighbours,
            render_charts,
            render_series,
            series_diagnostics,
        )

        stored = stored_or_404(ctx.store, assessment_id)
        head = orjson.loads(stored.head)
        head["series"] = [orjson.loads(blob) for blob in stored.series]
        assessment = AssessmentDocument.from_dict(head)
        entry = find_series(assessment, series_id)
        if entry is None:
            raise ApiError(404, f"assessment {assessment_id!r} has no series {series_id!r}")
        before, after = neighbours(assessment.series, series_id)

        def page_of(sid: str | None) -> tuple[str, str] | None:
            return None if sid is None else (sid, f"{base}/series/{quote(sid, safe='')}{suffix}")

        def draw() -> tuple[Any, ...]:
            inputs = _inputs_of(ctx.store, assessment_id, series_id)
            if inputs is None:
                raise ApiError(404, f"the inputs of series {series_id!r} were not stored")
            inputs = baseline_path(ctx.store, assessment.extra.get("baseline"), inputs)
            diag = series_diagnostics(
                inputs,
                entry,
                season_length=assessment.season_length,
                model_params=assessment.model_params,
            )
            return render_charts(diag)

        charts = _chart_cache(ctx.services).get_or_render((assessment_id, series_id), draw)
        return render_series(
            assessment,
            entry,
            charts,
            report_href=base + suffix,
            previous=page_of(before),
            following=page_of(after),
        )

    return _html(await run_in_threadpool(work))


@router.post(
    "/{assessment_id}/links",
    summary="A signed, expiring link that opens this report without a token",
    response_model=LinkCreated,
    responses=problem_docs(400, 401, 403, 404, 422),
)
async def create_link(
    request: Request,
    assessment_id: str,
    ctx: Annotated[Context, Depends(report_context)],
    body: Annotated[LinkRequest | None, Body()] = None,
) -> Response:
    """``{"url", "expires_at"}``: the link opens this report and its series pages, and nothing
    else, until ``expires_at``. Needs the ``read`` scope."""
    await _require_read(request, ctx)
    ttl = ctx.settings.link_ttl_seconds
    if body is not None and body.ttl_seconds is not None:
        if body.ttl_seconds > ttl:
            raise ApiError(
                422,
                f"ttl_seconds: at most {ttl} (the server's link_ttl_seconds)",
                errors=[{"loc": "ttl_seconds", "message": f"must be at most {ttl}"}],
            )
        ttl = body.ttl_seconds
    await run_in_threadpool(stored_or_404, ctx.store, assessment_id)
    link = links.sign_link(secret=link_secret(ctx), assessment_id=assessment_id, ttl_seconds=ttl)
    # base_url already carries the app's root path.
    url = (
        f"{str(request.base_url).rstrip('/')}/v1/assessments/"
        f"{quote(assessment_id, safe='')}/report?{link.query}"
    )
    return json_response(
        {"url": url, "expires_at": link.expires_at, "assessment_id": assessment_id}
    )
