"""A small synchronous client for the Plumbline REST API, built on httpx.

Connection errors, 5xx answers and 429 (too many requests) are retried with exponential backoff,
or after the delay a ``Retry-After`` header asks for (seconds or an HTTP date). Every assessment is
sent
with one ``Idempotency-Key`` reused across its retries, so a retry after a lost answer returns the
stored result (200) instead of storing the assessment a second time.

Example::

    from service.client import PlumblineClient

    with PlumblineClient("http://127.0.0.1:8000", token="...") as client:
        result = client.assess(body)  # an AssessmentDocument (service/results/)
        if result.blocks("fail"):
            raise SystemExit(1)

Tests (or an application embedding the service) pass their own ``httpx.Client`` (for instance
Starlette's ``TestClient``) as ``http=``, or an ``httpx.BaseTransport`` as ``transport=``.
"""

from __future__ import annotations

import json
import os
import time
import uuid
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass
from datetime import UTC, datetime
from email.utils import parsedate_to_datetime
from typing import Any, Literal

import httpx

# The result records and their reader: standard library only, no numpy, no core.
from .results import (
    VERDICTS,
    AssessmentDocument,
    AssessmentResult,
    CheckSummary,
    PolicyRef,
    Reason,
    SeriesCheck,
    SeriesResult,
    verdict_blocks,
)

__all__ = [
    "VERDICTS",
    "AssessmentDocument",
    "AssessmentPage",
    "AssessmentResult",
    "AssessmentSummary",
    "CheckSummary",
    "ClientError",
    "JobFailed",
    "JobStatus",
    "ModelOverview",
    "PlumblineClient",
    "PolicyRef",
    "Reason",
    "RequestRejected",
    "SeriesCheck",
    "SeriesResult",
    "ServerBusy",
    "ServerError",
    "ServerUnreachable",
    "TokenCreated",
    "TokenInfo",
    "VerdictResult",
    "verdict_blocks",
]

ARROW_STREAM = "application/vnd.apache.arrow.stream"
PARQUET = "application/vnd.apache.parquet"
PARQUET_EXTENSIONS = (".parquet", ".pq")
ARROW_EXTENSIONS = (".arrow", ".arrows", ".ipc")

# --------------------------------------------------------------------------- errors


class ClientError(Exception):
    """Base class of everything this client raises about a request."""


class ServerUnreachable(ClientError):
    """No answer from the server after every retry (connection refused, timeout, reset...)."""

    def __init__(self, url: str, attempts: int, cause: Exception) -> None:
        self.url = url
        self.attempts = attempts
        self.cause = cause
        noun = "attempt" if attempts == 1 else "attempts"
        super().__init__(f"server unreachable at {url} after {attempts} {noun}: {_describe(cause)}")


class ServerError(ClientError):
    """The server answered with a 5xx after every retry, or with a body that is not the API's."""

    def __init__(self, message: str, *, status: int | None = None) -> None:
        self.status = status
        super().__init__(message)


class ServerBusy(ServerError):
    """The server kept refusing for load (429 too many requests, or 503) after every retry, or
    asked to wait longer than the client is willing to (``retry_after`` seconds, when it said)."""

    def __init__(self, message: str, *, status: int, retry_after: float | None = None) -> None:
        super().__init__(message, status=status)
        self.retry_after = retry_after


class JobFailed(ServerError):
    """A background assessment ended ``failed`` on the server (a server-side error, recorded
    with the job); ``problem`` is its RFC 9457 document."""

    def __init__(self, job_id: str, problem: Mapping[str, Any]) -> None:
        self.job_id = job_id
        self.problem = dict(problem)
        status = problem.get("status")
        detail = problem.get("detail") or problem.get("title") or "no details"
        super().__init__(
            f"job {job_id} failed on the server: {detail}",
            status=status if isinstance(status, int) else None,
        )


class RequestRejected(ClientError):
    """A 4xx answer: the request (body, token, scope, name...) was refused.

    ``title``/``detail``/``errors`` come from the RFC 9457 problem body; ``errors`` is the list of
    ``{"loc", "message"}`` the server gives for invalid input (empty otherwise).
    """

    def __init__(
        self,
        status: int,
        title: str,
        detail: str,
        errors: Sequence[Mapping[str, Any]] = (),
        body: Mapping[str, Any] | None = None,
    ) -> None:
        self.status = status
        self.title = title
        self.detail = detail
        self.errors = tuple(dict(e) for e in errors)
        self.body = dict(body or {})
        super().__init__(self.summary())

    def summary(self, limit: int = 3) -> str:
        """One line: the status, then the first ``limit`` field errors (or the detail)."""
        head = f"{self.status} {self.title}".strip()
        if self.errors:
            parts = [_error_text(e) for e in self.errors[:limit]]
            more = len(self.errors) - limit
            text = "; ".join(parts) + (f" (and {more} more)" if more > 0 else "")
            return f"{head}: {text}"
        return f"{head}: {_short(self.detail, 2 * SHORT_TEXT)}" if self.detail else head


SHORT_TEXT = 200
"""Most characters of one field error in :meth:`RequestRejected.summary`."""


def _short(text: str, limit: int = SHORT_TEXT) -> str:
    """``text`` on one line, cut to ``limit`` characters."""
    text = " ".join(text.split())
    return text if len(text) <= limit else text[: limit - 3] + "..."


def _error_text(error: Mapping[str, Any]) -> str:
    loc = error.get("loc")
    message = str(error.get("message", "invalid"))
    return _short(f"{loc}: {message}" if loc else message)


def _describe(exc: Exception) -> str:
    text = str(exc).strip()
    return f"{type(exc).__name__}: {text}" if text else type(exc).__name__


# --------------------------------------------------------------------------- results


@dataclass(frozen=True)
class AssessmentSummary:
    """One row of ``GET /v1/assessments``."""

    id: str
    created_at: str | None
    model: str
    version: str
    verdict: str
    n_series: int
    n_failed: int
    n_warned: int
    policy: PolicyRef

    @classmethod
    def from_json(cls, row: Mapping[str, Any]) -> AssessmentSummary:
        policy = row.get("policy") or {}
        if isinstance(policy, str):  # a bare name
            policy = {"name": policy}
        return cls(
            id=str(row["id"]),
            created_at=row.get("created_at"),
            model=str(row["model"]),
            version=str(row["version"]),
            verdict=str(row["verdict"]),
            n_series=int(row.get("n_series") or 0),
            n_failed=int(row.get("n_failed") or 0),
            n_warned=int(row.get("n_warned") or 0),
            policy=PolicyRef(
                name=str(policy.get("name", "")), version=int(policy.get("version") or 0)
            ),
        )


@dataclass(frozen=True)
class AssessmentPage:
    """A page of summaries, newest first; ``next_cursor`` fetches the next (``None``: last)."""

    items: tuple[AssessmentSummary, ...]
    next_cursor: str | None

    @classmethod
    def from_json(cls, data: Mapping[str, Any]) -> AssessmentPage:
        items = data.get("items")
        if not isinstance(items, list):
            raise ValueError("'items' is not a list")
        cursor = data.get("next_cursor")
        return cls(
            items=tuple(AssessmentSummary.from_json(r) for r in items),
            next_cursor=None if cursor is None else str(cursor),
        )


@dataclass(frozen=True)
class ModelOverview:
    """One row of ``GET /v1/models``: a model and its newest assessment."""

    model: str
    version: str
    verdict: str
    assessment_id: str
    created_at: str | None
    n_series: int
    n_passed: int
    n_warned: int
    n_failed: int
    checks_failed: tuple[str, ...]
    checks_warned: tuple[str, ...]
    policy: PolicyRef
    n_assessments: int
    n_versions: int
    labels: Mapping[str, str]

    @classmethod
    def from_json(cls, row: Mapping[str, Any]) -> ModelOverview:
        policy = row.get("policy") or {}
        return cls(
            model=str(row["model"]),
            version=str(row["version"]),
            verdict=str(row["verdict"]),
            assessment_id=str(row["assessment_id"]),
            created_at=row.get("created_at"),
            n_series=int(row["n_series"]),
            n_passed=int(row["n_passed"]),
            n_warned=int(row["n_warned"]),
            n_failed=int(row["n_failed"]),
            checks_failed=tuple(str(c) for c in row.get("checks_failed") or ()),
            checks_warned=tuple(str(c) for c in row.get("checks_warned") or ()),
            policy=PolicyRef(
                name=str(policy.get("name", "")), version=int(policy.get("version") or 0)
            ),
            n_assessments=int(row["n_assessments"]),
            n_versions=int(row["n_versions"]),
            labels={str(k): str(v) for k, v in (row.get("labels") or {}).items()},
        )


@dataclass(frozen=True)
class VerdictResult:
    """The latest stored verdict of a model; ``met`` answers ``require`` (``None`` without it);
    ``baseline`` the comparison with its baseline, when that assessment had one."""

    model: str
    version: str | None
    verdict: str
    assessment_id: str | None
    created_at: str | None
    met: bool | None
    baseline: Mapping[str, Any] | None = None

    @classmethod
    def from_json(cls, data: Mapping[str, Any], *, met: bool | None) -> VerdictResult:
        if not isinstance(data, Mapping):
            raise ValueError("expected a JSON object")
        verdict = data.get("verdict")
        if verdict not in VERDICTS:
            raise ValueError(f"'verdict' is {verdict!r}, expected one of {', '.join(VERDICTS)}")
        return cls(
            model=str(data.get("model", "")),
            version=None if data.get("version") is None else str(data["version"]),
            verdict=str(verdict),
            assessment_id=None if data.get("assessment_id") is None else str(data["assessment_id"]),
            created_at=data.get("created_at"),
            met=met,
            baseline=data["baseline"] if isinstance(data.get("baseline"), Mapping) else None,
        )


@dataclass(frozen=True)
class JobStatus:
    """``GET /v1/jobs/{id}``: a background assessment's state and progress."""

    id: str
    state: str
    series_done: int
    series_total: int
    assessment_id: str | None
    error: Mapping[str, Any] | None
    retry_after: float | None = None

    @property
    def finished(self) -> bool:
        return self.state in ("done", "failed")

    @classmethod
    def from_json(cls, data: Mapping[str, Any], retry_after: float | None = None) -> JobStatus:
        progress = data["progress"]
        assessment = data.get("assessment")
        return cls(
            id=str(data["id"]),
            state=str(data["state"]),
            series_done=int(progress["series_done"]),
            series_total=int(progress["series_total"]),
            assessment_id=None if not assessment else str(assessment["id"]),
            error=data.get("error"),
            retry_after=retry_after,
        )


JobHook = Callable[[JobStatus], None]
"""Told each state of a job :meth:`PlumblineClient.wait_for_job` sees."""

JOB_ABOVE_BYTES = 8 * 1024 * 1024
"""By default, :meth:`PlumblineClient.assess` sends a body larger than this as a job."""


@dataclass(frozen=True)
class TokenCreated:
    """A new token; ``token`` is the secret, shown this once."""

    id: str
    token: str
    label: str | None = None
    scopes: tuple[str, ...] = ()


@dataclass(frozen=True)
class TokenInfo:
    """A stored token without its secret."""

    id: str
    label: str | None
    scopes: tuple[str, ...]
    created_at: str | None
    revoked_at: str | None

    @property
    def active(self) -> bool:
        return self.revoked_at is None


# --------------------------------------------------------------------------- client

RetryHook = Callable[[int, float, str], None]
"""Called before each retry with (attempt number just failed, delay in seconds, what failed)."""


class PlumblineClient:
    """Synchronous client of the Plumbline API.

    Parameters
    ----------
    base_url
        Server root, e.g. ``http://127.0.0.1:8000`` (a path prefix is kept). May be omitted when
        ``http`` already has a ``base_url``.
    token
        Bearer token sent as ``Authorization``.
    http
        An ``httpx.Client`` to use (not closed by this client), e.g. Starlette's ``TestClient``.
    transport
        An ``httpx.BaseTransport`` for a client built here (ignored when ``http`` is given).
    timeout
        Seconds to wait for an answer (an assessment of a large fleet takes a while).
    retries
        Retries after the first attempt on a connection error, a 5xx answer or a 429.
    backoff, max_backoff
        Delay before retry ``i`` (0-based) is ``min(backoff * 2**i, max_backoff)`` seconds.
    max_retry_after
        A ``Retry-After`` on a 429 or 5xx answer (seconds, or an HTTP date) is waited out as
        asked, up to this many seconds; when the server asks for longer, the client stops
        and raises :class:`ServerBusy` (or :class:`ServerError`) at once instead.
    sleep, on_retry
        ``sleep(seconds)`` waits between attempts and between looks at a job (default
        ``time.sleep``); ``on_retry(attempt, delay, what)`` is told before each retry.
    job_above_bytes
        :meth:`assess` sends a body larger than this as a background job and waits for it.
    """

    def __init__(
        self,
        base_url: str | None = None,
        *,
        token: str | None = None,
        http: httpx.Client | None = None,
        transport: httpx.BaseTransport | None = None,
        timeout: float = 120.0,
        retries: int = 3,
        backoff: float = 0.5,
        max_backoff: float = 8.0,
        max_retry_after: float = 60.0,
        sleep: Callable[[float], None] | None = None,
        on_retry: RetryHook | None = None,
        job_above_bytes: int = JOB_ABOVE_BYTES,
    ) -> None:
        if retries < 0:
            raise ValueError(f"retries must be >= 0, got {retries}")
        if backoff < 0 or max_backoff < 0 or max_retry_after < 0:
            raise ValueError("backoff, max_backoff and max_retry_after must be >= 0")
        if base_url is None and http is None:
            raise ValueError("base_url is required unless an httpx.Client is given as http")
        self._base = "" if base_url is None else _check_base_url(base_url)
        self._token = token
        self._owns_http = http is None
        self._http = (
            http
            if http is not None
            else httpx.Client(transport=transport, timeout=httpx.Timeout(timeout, connect=10.0))
        )
        self._retries = retries
        self._backoff = backoff
        self._max_backoff = max_backoff
        self._max_retry_after = max_retry_after
        self._sleep = sleep if sleep is not None else time.sleep
        self._on_retry = on_retry
        self._job_above = job_above_bytes

    @property
    def base_url(self) -> str:
        return self._base or str(self._http.base_url)

    def close(self) -> None:
        if self._owns_http:
            self._http.close()

    def __enter__(self) -> PlumblineClient:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    # ------------------------------------------------------------------ endpoints

    def assess(
        self,
        body: Mapping[str, Any] | None = None,
        *,
        csv: str | None = None,
        arrow: bytes | None = None,
        parquet: bytes | None = None,
        params: Mapping[str, Any] | None = None,
        store: bool = True,
        idempotency_key: str | None = None,
        as_job: bool | None = None,
        on_progress: JobHook | None = None,
        wait_seconds: float | None = None,
        series: str | None = None,
    ) -> AssessmentDocument:
        """``POST /v1/assessments`` with a JSON ``body``, ``csv`` text (long format), or the
        bytes of an ``arrow`` IPC stream or a ``parquet`` file in the same long layout.

        ``params`` become query parameters (for CSV, Arrow and Parquet: model, version,
        policy, season_length, model_params, level). ``series`` sizes the answer: ``"all"``
        (the server's default), ``"flagged"`` or ``"none"`` (then ``result.series`` holds
        only those rows and ``extra["series_shown"]`` says so; the counts stay whole). One
        ``Idempotency-Key`` (``idempotency_key`` or a fresh UUID) is sent on every attempt
        of this call.

        ``as_job`` true sends ``Prefer: respond-async``: the server queues a job and this call
        waits for it (:meth:`wait_for_job`, telling ``on_progress`` each state it polls, for
        ``wait_seconds`` at most: default no limit), then reads the stored assessment. The
        default, ``None``, does so when the body is larger than ``job_above_bytes`` and the
        assessment is stored. A server that answers at once (a repeated key, ``store`` false)
        is answered as without a job.
        """
        given = [v for v in (body, csv, arrow, parquet) if v is not None]
        if len(given) != 1:
            raise ValueError("give exactly one of body, csv, arrow or parquet")
        if body is not None:
            try:
                content = json.dumps(body, allow_nan=False, separators=(",", ":")).encode()
            except ValueError as exc:
                raise ValueError(
                    "body holds NaN or infinity, which JSON cannot carry; use null for missing"
                ) from exc
            content_type = "application/json"
        elif csv is not None:
            content = csv.encode()
            content_type = "text/csv"
        elif arrow is not None:
            content, content_type = bytes(arrow), ARROW_STREAM
        else:
            content, content_type = bytes(parquet), PARQUET  # type: ignore[arg-type]
        query = {k: _param(v) for k, v in (params or {}).items() if v is not None}
        if not store:
            query["store"] = "false"
        if series is not None:
            query["series"] = series
        headers = {
            "Content-Type": content_type,
            "Idempotency-Key": idempotency_key or str(uuid.uuid4()),
        }
        if as_job is None:
            as_job = store and len(content) > self._job_above
        if as_job:
            headers["Prefer"] = "respond-async"
        resp = self._send("POST", "/v1/assessments", content=content, headers=headers, params=query)
        data = self._json(resp)
        if resp.status_code == 202:
            job = self._parse(JobStatus.from_json, data, retry_after=_retry_after(resp))
            if on_progress is not None:
                on_progress(job)
            return self.wait_for_job(job.id, on_progress=on_progress, timeout=wait_seconds)
        replayed = resp.status_code == 200 or resp.headers.get("Idempotent-Replayed") == "true"
        return self._parse(AssessmentDocument.from_dict, data, replayed=replayed)

    def job(self, job_id: str) -> JobStatus:
        """``GET /v1/jobs/{id}``: a background assessment's state and progress."""
        resp = self._send("GET", f"/v1/jobs/{_segment(job_id)}")
        return self._parse(JobStatus.from_json, self._json(resp), retry_after=_retry_after(resp))

    def wait_for_job(
        self,
        job_id: str,
        *,
        on_progress: JobHook | None = None,
        timeout: float | None = None,
        poll_seconds: float | None = None,
    ) -> AssessmentDocument:
        """Poll a job until it ends; its stored assessment. Between looks it waits the job's
        ``Retry-After`` (or ``poll_seconds``, default 1 s). Raises :class:`JobFailed` when the
        job failed and ``TimeoutError`` after ``timeout`` seconds (default: no limit)."""
        deadline = None if timeout is None else time.monotonic() + timeout
        while True:
            job = self.job(job_id)
            if on_progress is not None:
                on_progress(job)
            if job.state == "done" and job.assessment_id is not None:
                return self.assessment(job.assessment_id)
            if job.state == "failed":
                raise JobFailed(job.id, job.error or {})
            pause = poll_seconds if poll_seconds is not None else (job.retry_after or 1.0)
            if deadline is not None:
                left = deadline - time.monotonic()
                if left <= 0:
                    raise TimeoutError(f"job {job_id} still {job.state} after {timeout:g} s")
                pause = min(pause, left)
            self._sleep(pause)

    def assess_file(
        self, path: str | os.PathLike[str], *, params: Mapping[str, Any] | None = None, **kw: Any
    ) -> AssessmentDocument:
        """:meth:`assess` on a file of the long layout, sent as its extension says:
        ``.parquet`` (or ``.pq``) as Parquet, ``.arrow`` (``.arrows``, ``.ipc``) as an Arrow
        IPC stream, ``.csv`` as CSV; ``.json`` is read as the JSON body."""
        ext = os.path.splitext(os.fspath(path))[1].lower()
        with open(path, "rb") as fh:
            data = fh.read()
        if ext in PARQUET_EXTENSIONS:
            return self.assess(parquet=data, params=params, **kw)
        if ext in ARROW_EXTENSIONS:
            return self.assess(arrow=data, params=params, **kw)
        if ext == ".csv":
            return self.assess(csv=data.decode("utf-8-sig"), params=params, **kw)
        if ext == ".json":
            return self.assess(json.loads(data), params=params, **kw)
        raise ValueError(f"{path}: expected a .json, .csv, .parquet or .arrow file")

    def assessment(self, assessment_id: str, *, series: str | None = None) -> AssessmentDocument:
        """``GET /v1/assessments/{id}``: a stored result (``series`` as for :meth:`assess`)."""
        resp = self._send(
            "GET",
            f"/v1/assessments/{_segment(assessment_id)}",
            params=None if series is None else {"series": series},
        )
        return self._parse(AssessmentDocument.from_dict, self._json(resp))

    def series_download(
        self,
        assessment_id: str,
        *,
        media_type: str = "application/vnd.apache.parquet",
        check: str | None = None,
        status: str | None = None,
    ) -> bytes:
        """``GET /v1/assessments/{id}/series`` as a download: every row (one per series and
        check) as Parquet (the default), an Arrow IPC stream
        (``application/vnd.apache.arrow.stream``) or CSV (``text/csv``)."""
        query = {k: v for k, v in (("check", check), ("status", status)) if v is not None}
        resp = self._send(
            "GET",
            f"/v1/assessments/{_segment(assessment_id)}/series",
            params=query or None,
            headers={"Accept": media_type},
        )
        return resp.content

    def list_assessments(
        self,
        *,
        model: str | None = None,
        version: str | None = None,
        verdict: str | None = None,
        since: str | None = None,
        until: str | None = None,
        limit: int | None = None,
        cursor: str | None = None,
    ) -> AssessmentPage:
        """``GET /v1/assessments``: one page of summaries, newest first."""
        filters = {
            "model": model,
            "version": version,
            "verdict": verdict,
            "since": since,
            "until": until,
            "limit": limit,
            "cursor": cursor,
        }
        params = {k: _param(v) for k, v in filters.items() if v is not None}
        resp = self._send("GET", "/v1/assessments", params=params)
        return self._parse(AssessmentPage.from_json, self._json(resp))

    def models(self, *, verdict: str | None = None) -> list[ModelOverview]:
        """``GET /v1/models``: every model with its newest assessment, by name."""
        params = {} if verdict is None else {"verdict": verdict}
        data = self._json(self._send("GET", "/v1/models", params=params))
        items = data.get("items")
        if not isinstance(items, list):
            raise ServerError("the models answer has no list of items")
        return [self._parse(ModelOverview.from_json, row) for row in items]

    def verdict(
        self, model: str, *, version: str | None = None, require: str | None = None
    ) -> VerdictResult:
        """``GET /v1/models/{model}/verdict``; with ``require``, a 412 gives ``met=False``."""
        if require is not None and require not in ("pass", "warn"):
            raise ValueError(f"require must be 'pass' or 'warn', got {require!r}")
        params = {k: v for k, v in (("version", version), ("require", require)) if v is not None}
        resp = self._send(
            "GET", f"/v1/models/{_segment(model)}/verdict", params=params, accept={412}
        )
        met: bool | None = None if require is None else resp.status_code != 412
        return self._parse(VerdictResult.from_json, self._json(resp), met=met)

    def compare(self, model: str, *, a: str, b: str) -> dict[str, Any]:
        """``GET /v1/models/{model}/compare``: version ``b`` against version ``a`` (or
        ``latest-pass``) on their stored holdouts, as the service answers it (JSON)."""
        resp = self._send("GET", f"/v1/models/{_segment(model)}/compare", params={"a": a, "b": b})
        data = self._json(resp)
        if not isinstance(data, dict):
            raise ServerError("the comparison is not a JSON object")
        return data

    def create_link(self, assessment_id: str) -> str | None:
        """``POST /v1/assessments/{id}/links``: a shareable report URL, or ``None`` when the
        server does not offer links (404/405) or this token may not make one (403)."""
        try:
            # Not retried on failure (a link is a convenience), only when the server is busy.
            resp = self._send(
                "POST", f"/v1/assessments/{_segment(assessment_id)}/links", retry="busy"
            )
        except RequestRejected as exc:
            if exc.status in (403, 404, 405):
                return None
            raise
        url = self._json(resp).get("url")
        return str(url) if url else None

    def create_token(self, *, scopes: Sequence[str], label: str) -> TokenCreated:
        """``POST /v1/tokens`` (admin): the secret is in the answer only this once."""
        body = json.dumps({"scopes": list(scopes), "label": label}).encode()
        resp = self._send(
            "POST",
            "/v1/tokens",
            content=body,
            headers={"Content-Type": "application/json"},
            retry=False,
        )
        data = self._json(resp)
        try:
            return TokenCreated(
                id=str(data["id"]),
                token=str(data["token"]),
                label=data.get("label", label),
                scopes=tuple(data.get("scopes", scopes)),
            )
        except KeyError as exc:
            raise ServerError(f"token answer lacks {exc}", status=resp.status_code) from None

    def list_tokens(self) -> list[TokenInfo]:
        """``GET /v1/tokens`` (admin): ``{"items": [{"id", "label", "scopes", "created_at",
        "revoked_at"}]}``."""
        data = self._json(self._send("GET", "/v1/tokens"))
        try:
            return [
                TokenInfo(
                    id=str(t["id"]),
                    label=t.get("label"),
                    scopes=tuple(t.get("scopes") or ()),
                    created_at=t.get("created_at"),
                    revoked_at=t.get("revoked_at"),
                )
                for t in data["items"]
            ]
        except (KeyError, TypeError) as exc:
            raise ServerError(f"token list answer is malformed ({exc})") from None

    def revoke_token(self, token_id: str) -> None:
        """``DELETE /v1/tokens/{id}`` (admin)."""
        self._send("DELETE", f"/v1/tokens/{_segment(token_id)}")

    # ------------------------------------------------------------------ plumbing

    def _delay(self, attempt: int, resp: httpx.Response | None = None) -> float:
        """The wait before retry ``attempt + 1``: what ``Retry-After`` asks, else the backoff."""
        if resp is not None:
            asked = retry_after_seconds(resp.headers.get("Retry-After"))
            if asked is not None:
                return asked
        return min(self._backoff * (2**attempt), self._max_backoff)

    def _send(
        self,
        method: str,
        path: str,
        *,
        content: bytes | None = None,
        headers: Mapping[str, str] | None = None,
        params: Mapping[str, str] | None = None,
        retry: bool | Literal["busy"] = True,
        accept: frozenset[int] | set[int] = frozenset(),
    ) -> httpx.Response:
        """Send with retries: ``retry=True`` retries connection errors, 5xx and 429;
        ``"busy"`` only a 429 (the server's rate limit); ``False`` nothing."""
        url = self._base + path
        sent = {"Accept": "application/json, application/problem+json"}
        if self._token:
            sent["Authorization"] = f"Bearer {self._token}"
        sent.update(headers or {})  # the same headers (Idempotency-Key) on every attempt
        attempts = self._retries + 1 if retry else 1
        tried = 0
        for attempt in range(attempts):
            tried = attempt + 1
            last = tried == attempts
            try:
                resp = self._http.request(
                    method, url, content=content, headers=sent, params=params or None
                )
            except httpx.UnsupportedProtocol as exc:
                raise ValueError(f"server URL {self.base_url!r} is not http(s): {exc}") from exc
            except httpx.TransportError as exc:
                if last or retry is not True:
                    raise ServerUnreachable(self.base_url, tried, exc) from exc
                self._pause(attempt, None, _describe(exc))
                continue
            status = resp.status_code
            again = status == 429 or (status >= 500 and retry is True)
            if again and not last:
                delay = self._delay(attempt, resp)
                if delay > self._max_retry_after:
                    break  # asked to wait longer than this client will: answer now
                self._pause(attempt, resp, f"server answered {status}", delay)
                continue
            break
        status = resp.status_code
        if status == 429 or status == 503:
            asked = retry_after_seconds(resp.headers.get("Retry-After"))
            wait = "" if asked is None else f"; it asked to wait {asked:g}s"
            if asked is not None and asked > self._max_retry_after:
                wait += f", longer than this client waits ({self._max_retry_after:g}s)"
            raise ServerBusy(
                f"server busy ({status}) on {method} {path} after {tried} "
                f"attempt{'s' if tried != 1 else ''}{wait}: {_problem_text(resp)}",
                status=status,
                retry_after=asked,
            )
        if status >= 500:
            raise ServerError(
                f"server error {status} from {method} {path} after {tried} "
                f"attempt{'s' if tried != 1 else ''}: {_problem_text(resp)}",
                status=status,
            )
        if status >= 400 and status not in accept:
            raise _rejected(resp)
        return resp

    def _pause(
        self, attempt: int, resp: httpx.Response | None, what: str, delay: float | None = None
    ) -> None:
        delay = self._delay(attempt, resp) if delay is None else delay
        if self._on_retry is not None:
            self._on_retry(attempt + 1, delay, what)
        self._sleep(delay)

    @staticmethod
    def _json(resp: httpx.Response) -> dict[str, Any]:
        try:
            data = resp.json()
        except ValueError:
            raise ServerError(
                f"server answered {resp.status_code} with a body that is not JSON",
                status=resp.status_code,
            ) from None
        if not isinstance(data, dict):
            raise ServerError("server answer is not a JSON object", status=resp.status_code)
        return data

    @staticmethod
    def _parse(build: Callable[..., Any], data: Mapping[str, Any], **kwargs: Any) -> Any:
        try:
            return build(data, **kwargs)
        except (ValueError, KeyError, TypeError) as exc:
            raise ServerError(f"unexpected answer from the server: {exc}") from None


def retry_after_seconds(value: str | None, now: datetime | None = None) -> float | None:
    """The seconds a ``Retry-After`` header value asks to wait (RFC 9110 section 10.2.3): a
    whole number of seconds, or an HTTP date (``now`` is the time it is read at, default the
    present; a date in the past is 0). ``None`` when absent or unreadable."""
    if value is None:
        return None
    text = value.strip()
    if text.isdigit():
        return float(text)
    try:
        when = parsedate_to_datetime(text)
    except (TypeError, ValueError, IndexError):
        return None
    if when.tzinfo is None:  # an HTTP date is in GMT
        when = when.replace(tzinfo=UTC)
    now = now if now is not None else datetime.now(UTC)
    return max((when - now).total_seconds(), 0.0)


def _check_base_url(base_url: str) -> str:
    try:
        url = httpx.URL(base_url)
    except httpx.InvalidURL as exc:
        raise ValueError(f"server URL {base_url!r} is not a valid URL: {exc}") from None
    if url.scheme not in ("http", "https") or not url.host:
        raise ValueError(
            f"server URL {base_url!r} must look like http://host:port (scheme and host)"
        )
    return base_url.rstrip("/")


def _retry_after(resp: httpx.Response) -> float | None:
    after = resp.headers.get("Retry-After", "").strip()
    return float(after) if after.isdigit() else None


def _segment(value: str) -> str:
    from urllib.parse import quote

    return quote(str(value), safe="")


def _param(value: Any) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    return str(value)


def _problem(resp: httpx.Response) -> dict[str, Any]:
    try:
        data = resp.json()
    except ValueError:
        return {}
    return data if isinstance(data, dict) else {}


def _problem_text(resp: httpx.Response) -> str:
    problem = _problem(resp)
    text = problem.get("detail") or problem.get("title")
    if text:
        return str(text)
    return resp.reason_phrase or "no details"


def _rejected(resp: httpx.Response) -> RequestRejected:
    problem = _problem(resp)
    errors = problem.get("errors")
    if not isinstance(errors, list):
        errors = []
    return RequestRejected(
        status=resp.status_code,
        title=str(problem.get("title") or resp.reason_phrase or ""),
        detail=str(problem.get("detail") or ""),
        errors=[e for e in errors if isinstance(e, Mapping)],
        body=problem,
    )
