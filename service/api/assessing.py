"""Running an assessment request: request -> arrays -> core -> verdict -> store -> response.

Kept apart from the HTTP router so the work runs in one thread-pool call per request.
"""

from __future__ import annotations

import hashlib
import time
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import orjson
from sqlalchemy import Engine

from service.core.gate import assess
from service.ingest import AssessmentRequest, parse_csv_request, parse_json_request
from service.settings import Settings
from service.store import repository as repo

from . import policy_lookup
from .errors import ApiError

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
        """The ``Server-Timing`` header value: milliseconds per stage."""
        return ", ".join(f"{k};dur={v * 1000:.1f}" for k, v in self.timings.items())


def body_hash(kind: str, params: Mapping[str, str], body: bytes) -> str:
    """Fingerprint of a request for ``Idempotency-Key``: media type, parameters and bytes."""
    h = hashlib.sha256()
    h.update(kind.encode())
    h.update(b"\0")
    h.update(orjson.dumps(sorted(params.items())))
    h.update(b"\0")
    h.update(body)
    return h.hexdigest()


def replay(engine: Engine, key: str, digest: str) -> Outcome | None:
    """The stored outcome for a repeated ``Idempotency-Key`` (409 when the body differs)."""
    record = repo.find_idempotency_key(engine, key=key)
    if record is None:
        return None
    if record.body_hash != digest:
        raise ApiError(409, f"Idempotency-Key {key!r} was already used with another request "
                       "body; use a new key for a new assessment", slug="idempotency-key-reused")
    stored = repo.get_assessment_by_seq(engine, seq=record.assessment_seq)
    if stored is None:  # removed meanwhile: treat the key as free
        return None
    return Outcome(body=stored.to_json(), assessment_id=stored.summary.id,
                   verdict=stored.summary.verdict, replayed=True,
                   n_series=stored.summary.n_series)


def parse(kind: str, body: bytes, params: Mapping[str, str], settings: Settings
          ) -> AssessmentRequest:
    limits = {"max_series": settings.max_series, "max_series_length": settings.max_series_length}
    if kind == "csv":
        return parse_csv_request(body, params, **limits)
    return parse_json_request(body, **limits)


def _inputs(req: AssessmentRequest) -> list[repo.SeriesInput]:
    b = req.batch
    h = b.holdout
    out = []
    for i, sid in enumerate(req.ids):
        n, nh = int(req.train_lengths[i]), int(req.holdout_lengths[i])
        hold: dict[str, Any] = {}
        if h is not None and nh > 0:
            hold = {
                "holdout_actuals": h.actuals[i, :nh],
                "holdout_forecasts": h.forecasts[i, :nh],
                "holdout_timestamps": req.holdout_timestamps[i],
            }
            if h.lower is not None and h.upper is not None and not np.isnan(h.level[i]  # type: ignore[index]
                                                                              ):
                hold["holdout_lower"] = h.lower[i, :nh]
                hold["holdout_upper"] = h.upper[i, :nh]
                hold["holdout_level"] = float(h.level[i])  # type: ignore[index]
        weight = req.weights_given[i] if req.weights_given else None
        out.append(repo.SeriesInput(
            series_id=sid, weight=weight, actuals=b.actuals[i, :n], fitted=b.fitted[i, :n],
            timestamps=req.timestamps[i], **hold,
        ))
    return out


def run(
    engine: Engine,
    req: AssessmentRequest,
    *,
    store: bool,
    idempotency_key: str | None = None,
    digest: str | None = None,
    timings: dict[str, float] | None = None,
) -> Outcome:
    """Assess ``req`` under its policy and (unless ``store`` is false) save it.

    ``timings`` collects seconds per stage (policy, assess, encode, store).
    """
    timings = {} if timings is None else timings
    clock = time.perf_counter()
    policy, document = policy_lookup.resolve(engine, req.policy)
    timings["policy"] = time.perf_counter() - clock
    clock = time.perf_counter()
    result = assess(req.batch, policy).to_dict()
    timings["assess"] = time.perf_counter() - clock
    clock = time.perf_counter()
    series = result.pop("series")
    created = repo.utcnow()
    assessment_id = repo.new_id() if store else None
    head: dict[str, Any] = {
        "id": assessment_id,
        "created_at": created.isoformat(),
        "model": req.model,
        "version": req.version,
        "stored": store,
        "labels": req.labels,
        "season_length": req.season_length,
        "model_params": req.model_params,
        **result,
    }
    verdict = str(result["verdict"])
    if not store:
        head["series"] = series
        encoded_all = orjson.dumps(head, option=_DUMP)
        timings["encode"] = time.perf_counter() - clock
        return Outcome(body=encoded_all, assessment_id=None, verdict=verdict, replayed=False,
                       n_series=len(series), timings=timings)
    head_json = orjson.dumps(head, option=_DUMP)
    encoded = [orjson.dumps(s, option=_DUMP) for s in series]
    body = head_json[:-1] + b',"series":[' + b",".join(encoded) + b"]}"
    timings["encode"] = time.perf_counter() - clock
    clock = time.perf_counter()
    fleet = result.get("fleet") or {}
    verdicts = [s.get("verdict") for s in series]
    n_failed = int(fleet.get("n_failed", verdicts.count("fail")))
    n_warned = int(fleet.get("n_warned", verdicts.count("warn")))
    pol = result.get("policy") or {}
    try:
        repo.save_assessment(
            engine,
            assessment_id=assessment_id,  # type: ignore[arg-type]
            created_at=created,
            model=req.model,
            version=req.version,
            verdict=verdict,
            n_failed=n_failed,
            n_warned=n_warned,
            policy_name=str(pol.get("name", policy.name)),
            policy_version=int(pol.get("version", policy.version)),
            policy_document=document,
            head=head_json,
            series=[repo.SeriesResult(series_id=s["id"], verdict=s["verdict"],
                                      n_obs=int(s["n_obs"]), json=e)
                    for s, e in zip(series, encoded, strict=True)],
            inputs=_inputs(req),
            idempotency_key=idempotency_key,
            body_hash=digest,
        )
    except repo.IdempotencyConflict:
        # Another request with the same key won the race: answer as its repeat would be.
        again = replay(engine, idempotency_key, digest)  # type: ignore[arg-type]
        if again is not None:
            return again
        raise
    timings["store"] = time.perf_counter() - clock
    return Outcome(body=body, assessment_id=assessment_id, verdict=verdict, replayed=False,
                   n_series=len(series), timings=timings)
