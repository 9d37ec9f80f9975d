"""Running an assessment request: request -> arrays -> core -> verdict -> store -> response.

Kept apart from the HTTP router. :func:`run_many` takes a list of parsed submissions: the small
ones that wait together on the event loop (service/api/batching.py), or one large one in the
thread pool.
"""

from __future__ import annotations

import hashlib
import time
from collections.abc import Mapping
from dataclasses import dataclass, field
from datetime import datetime
from typing import IO, Any

import numpy as np
import orjson

from service.core.batch import Holdout
from service.core.gate import assess_many_results
from service.core.policy import Policy
from service.ingest import AssessmentRequest, parse_csv_request, parse_json_request
from service.results import AssessmentDocument, AssessmentResult, to_dicts
from service.settings import Settings
from service.store.port import Store, StoreConflict, StoreError
from service.store.records import (
    AssessmentSummary,
    NewAssessment,
    SeriesInput,
    SeriesResult,
    new_id,
    utcnow,
)

from . import policy_lookup, series_view
from .baseline import Match as BaselineMatch
from .baseline import attach as attach_baselines
from .errors import ApiError
from .spool import update_hash

_DUMP = orjson.OPT_SERIALIZE_NUMPY


@dataclass(frozen=True)
class Outcome:
    """What the endpoint answers: the JSON body and whether it is a stored replay."""

    body: bytes
    assessment_id: str | None
    verdict: str
    replayed: bool
    n_series: int
    timings: dict[str, float] = field(default_factory=dict)

    def server_timing(self) -> str:
        """The ``Server-Timing`` header value: milliseconds per stage, and the number of
        submissions assessed together with this one (``batch``) when there were several."""
        return ", ".join(
            f'{k};desc="{v:g}"' if k == "batch" else f"{k};dur={v * 1000:.1f}"
            for k, v in self.timings.items()
        )


def body_hash(kind: str, params: Mapping[str, str], body: bytes | IO[bytes]) -> str:
    """Fingerprint of a request for ``Idempotency-Key``: media type, parameters and bytes
    (a spooled body read from its file)."""
    h = hashlib.sha256()
    h.update(kind.encode())
    h.update(b"\0")
    h.update(orjson.dumps(sorted(params.items())))
    h.update(b"\0")
    update_hash(h, body)
    return h.hexdigest()


def replay(store: Store, key: str, digest: str, shown: str = "all") -> Outcome | None:
    """The stored outcome for a repeated ``Idempotency-Key`` (409 when the body differs),
    answered in the view ``shown`` (``?series=``)."""
    record = store.find_idempotency_key(key=key)
    if record is None:
        return None
    if record.body_hash != digest:
        raise ApiError(
            409,
            f"Idempotency-Key {key!r} was already used with another request "
            "body; use a new key for a new assessment",
            slug="idempotency-key-reused",
        )
    stored = store.get_assessment_by_seq(seq=record.assessment_seq)
    if stored is None:  # removed meanwhile: treat the key as free
        return None
    return Outcome(
        body=series_view.stored_answer(stored, shown),
        assessment_id=stored.summary.id,
        verdict=stored.summary.verdict,
        replayed=True,
        n_series=stored.summary.n_series,
    )


def parse(
    kind: str, body: bytes, params: Mapping[str, str], settings: Settings
) -> AssessmentRequest:
    limits = {"max_series": settings.max_series, "max_series_length": settings.max_series_length}
    if kind == "csv":
        return parse_csv_request(body, params, **limits)
    if kind in ("arrow", "parquet"):
        # pyarrow is imported by this parser alone, when such a body arrives.
        from service.ingest.columnar import parse_columnar_request

        return parse_columnar_request(body, kind, params, **limits)  # type: ignore[arg-type]
    return parse_json_request(body, **limits)


def holdout_input(h: Holdout | None, i: int, nh: int, stamps: Any) -> dict[str, Any]:
    """Row ``i``'s stored holdout fields (its first ``nh`` values; the interval and its level
    only where both bounds and a level were given); empty without a holdout."""
    if h is None or nh <= 0:
        return {}
    hold: dict[str, Any] = {
        "holdout_actuals": h.actuals[i, :nh],
        "holdout_forecasts": h.forecasts[i, :nh],
        "holdout_timestamps": stamps,
    }
    level = np.nan if h.level is None else float(h.level[i])
    if h.lower is not None and h.upper is not None and not np.isnan(level):
        hold["holdout_lower"] = h.lower[i, :nh]
        hold["holdout_upper"] = h.upper[i, :nh]
        hold["holdout_level"] = level
    return hold


def _inputs(req: AssessmentRequest) -> list[SeriesInput]:
    b = req.batch
    h = b.holdout
    out = []
    for i, sid in enumerate(req.ids):
        n, nh = int(req.train_lengths[i]), int(req.holdout_lengths[i])
        hold = holdout_input(h, i, nh, req.holdout_timestamps[i])
        out.append(
            SeriesInput(
                series_id=sid,
                weight=req.weights_given[i],
                actuals=b.actuals[i, :n],
                fitted=req.fitted_sent(i),
                timestamps=req.timestamps[i],
                burn_in=req.burn_in_of(i),
                **hold,
            )
        )
    return out


@dataclass
class Job:
    """One parsed submission waiting to be assessed (and stored unless ``store`` is false)."""

    req: AssessmentRequest
    store: bool
    idempotency_key: str | None = None
    digest: str | None = None
    timings: dict[str, float] = field(default_factory=dict)
    policy: Policy | None = None
    document: dict[str, Any] | None = None
    baseline: BaselineMatch | None = None
    shown: str = "all"
    """Which series rows the answer lists (``?series=``, :mod:`service.api.series_view`)."""


def resolve_policies(store: Store, jobs: list[Job]) -> list[Exception | None]:
    """Resolve the policy of each job that has none yet; a name (``"default"``,
    ``"name@3"``) is looked up once for all the jobs that give it. Per job: the error when its
    policy is unknown or invalid, or the database error that kept its name from being looked
    up (a job with an inline policy needs no database), else ``None``."""
    found: dict[str, tuple[Policy, dict[str, Any]] | Exception] = {}
    errors: list[Exception | None] = []
    for job in jobs:
        spec = job.req.policy
        clock = time.perf_counter()
        if job.policy is not None:
            errors.append(_weights_unused(job))
            continue
        try:
            if not isinstance(spec, str):
                hit: tuple[Policy, dict[str, Any]] | Exception = policy_lookup.resolve(store, spec)
            elif spec in found:
                hit = found[spec]
            else:
                hit = found[spec] = policy_lookup.resolve(store, spec)
        except (ApiError, StoreError) as exc:
            hit = exc
            if isinstance(spec, str):
                found[spec] = exc
        if isinstance(hit, Exception):
            errors.append(hit)
            continue
        job.policy, job.document = hit
        job.timings["policy"] = time.perf_counter() - clock
        errors.append(_weights_unused(job))
    return errors


def _weights_unused(job: Job) -> ApiError | None:
    """Weights given to a policy whose weighting ignores them: a 422 naming both, rather than
    weights silently dropped (the core refuses the same, ``WeightsNotUsed``)."""
    policy = job.policy
    given = job.req.batch.weights_given
    if policy is None or policy.fleet.weighting not in ("volume", "count") or not given.any():
        return None
    first = int(np.argmax(given))
    weighting = policy.fleet.weighting
    return ApiError(
        422,
        f"series[{first}].weight is given, but the policy weighs series by {weighting!r}, "
        "which ignores given weights: leave the weights out, or use a policy whose "
        "fleet.weighting is 'auto' or 'given'",
        errors=[
            {"loc": f"series[{first}].weight", "message": "given, but the policy ignores it"},
            {
                "loc": "policy.fleet.weighting",
                "message": f"is {weighting!r}, which ignores given weights",
            },
        ],
    )


def run_many(store: Store, jobs: list[Job]) -> list[Outcome | BaseException]:
    """Assess ``jobs`` together and save the stored ones in one transaction.

    Policies not yet resolved are resolved first (:func:`resolve_policies`), then the
    baselines asked for (:func:`service.api.baseline.attach`). The checks of
    jobs that share a policy and shape run in one vectorised pass
    (:func:`service.core.gate.assess_many_results`); each job is still decided and answered on
    its own series alone. A job's own failure is returned in its place: an unknown policy, an
    idempotency race it lost to a different body, a database error looking its policy up or
    on its write (then it was not written; jobs with ``store`` false keep their answers).
    """
    outcomes: list[Outcome | BaseException | None] = list(resolve_policies(store, jobs))
    attach_baselines(store, jobs, outcomes)
    ready = [i for i, o in enumerate(outcomes) if o is None]
    clock = time.perf_counter()
    # A stored job keeps every series row (they are stored); the answer may show fewer.
    results = assess_many_results(
        [(jobs[i].req.batch, jobs[i].policy) for i in ready],  # type: ignore[misc]
        [jobs[i].shown if not jobs[i].store else "all" for i in ready],
    )
    documents = [_document(jobs[i], result) for i, result in zip(ready, results, strict=True)]
    # One serializer for the whole pass: the stacked submissions' rows are built at once.
    encoded = to_dicts(documents)
    shared = time.perf_counter() - clock
    records: list[tuple[int, NewAssessment]] = []
    for i, doc, data in zip(ready, documents, encoded, strict=True):
        job = jobs[i]
        job.timings["assess"] = shared
        clock = time.perf_counter()
        outcomes[i], record = _answer(job, doc, data)
        job.timings["encode"] = time.perf_counter() - clock
        if record is not None:
            records.append((i, record))
    if records:
        clock = time.perf_counter()
        try:
            saved: list[AssessmentSummary | Exception] = store.save_assessments(
                [r for _, r in records]
            )
        except Exception as exc:  # nothing was written: each stored job answers the error
            saved = [exc] * len(records)
        took = time.perf_counter() - clock
        for (i, _), stored in zip(records, saved, strict=True):
            jobs[i].timings["store"] = took
            if isinstance(stored, StoreConflict):
                outcomes[i] = _lost_race(store, jobs[i])
            elif isinstance(stored, Exception):
                outcomes[i] = stored
    if len(jobs) > 1:
        for i in ready:
            jobs[i].timings["batch"] = len(jobs)
    return outcomes  # type: ignore[return-value]


def _lost_race(store: Store, job: Job) -> Outcome | ApiError | StoreError:
    """Another request with the same key was stored first: answer as its repeat would (or
    with the store's error when the look-up fails)."""
    try:
        again = replay(store, job.idempotency_key, job.digest, job.shown)  # type: ignore[arg-type]
    except ApiError as exc:  # the other request had another body: 409
        return exc
    except StoreError as exc:  # the store failed on the look-up: this job's answer alone
        return exc
    if again is not None:
        return again
    return ApiError(
        409,
        f"Idempotency-Key {job.idempotency_key!r} was being used by another "
        "request at the same moment; send the request again",
        slug="idempotency-key-reused",
    )


def stored_answer(
    job: Job, result: AssessmentResult, assessment_id: str
) -> tuple[Outcome, NewAssessment]:
    """The answer and the record to write of a stored ``job`` whose ``result`` was computed
    elsewhere (a background job's), under an id chosen beforehand."""
    doc = _document(job, result, assessment_id)
    (data,) = to_dicts([doc])
    outcome, record = _answer(job, doc, data)
    assert record is not None
    return outcome, record


def _document(
    job: Job, result: AssessmentResult, assessment_id: str | None = None
) -> AssessmentDocument:
    """The answer of one job: its result in the envelope (a new id when it is stored)."""
    req = job.req
    return AssessmentDocument(
        id=(assessment_id or new_id()) if job.store else None,
        created_at=utcnow().isoformat(),
        model=req.model,
        version=req.version,
        stored=job.store,
        labels=req.labels,
        season_length=req.season_length,
        model_params=req.model_params,
        extra={} if job.baseline is None else {"baseline": job.baseline.block()},
        result=result,
    )


def _answer(
    job: Job, doc: AssessmentDocument, data: dict[str, Any]
) -> tuple[Outcome, NewAssessment | None]:
    """The response body of one job (``data`` is ``doc.to_dict()``) and, when it is stored,
    the record to write."""
    req, store = job.req, job.store
    result = doc.result
    verdict = str(result.verdict)
    n_series = result.n_series
    if not store:
        if job.shown != "all":  # marked just before the rows, as a stored answer is
            data["series_shown"] = job.shown
            data["series"] = data.pop("series")
        return Outcome(
            body=orjson.dumps(data, option=_DUMP),
            assessment_id=None,
            verdict=verdict,
            replayed=False,
            n_series=n_series,
            timings=job.timings,
        ), None
    series = data.pop("series")  # the last key: stored row by row, the rest as the head
    head_json = orjson.dumps(data, option=_DUMP)
    encoded = [orjson.dumps(s, option=_DUMP) for s in series]
    table = result.series
    body = series_view.joined(
        head_json, series_view.picked(encoded, table.column("verdict"), job.shown), job.shown
    )
    record = NewAssessment(
        assessment_id=doc.id,  # type: ignore[arg-type]
        created_at=datetime.fromisoformat(doc.created_at),  # type: ignore[arg-type]
        model=req.model,
        version=req.version,
        verdict=verdict,
        n_failed=result.fleet.n_failed,
        n_warned=result.fleet.n_warned,
        policy_name=result.policy.name,
        policy_version=result.policy.version,
        policy_document=job.document,  # type: ignore[arg-type]
        head=head_json,
        series=[
            SeriesResult(series_id=sid, verdict=v, n_obs=n, json=e)
            for sid, v, n, e in zip(
                table.ids,
                table.column("verdict"),
                table.column("n_obs"),
                encoded,
                strict=True,
            )
        ],
        inputs=_inputs(req),
        idempotency_key=job.idempotency_key if store else None,
        body_hash=job.digest,
    )
    return Outcome(
        body=body,
        assessment_id=doc.id,
        verdict=verdict,
        replayed=False,
        n_series=n_series,
        timings=job.timings,
    ), record
