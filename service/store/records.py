"""What the store takes and hands back: plain records, free of any database type.

The API builds :class:`NewAssessment` s and reads :class:`StoredAssessment` s, summaries,
policies and tokens through the :class:`~service.store.port.Store`; none of them holds a
connection or a row object.
"""

from __future__ import annotations

import hashlib
import uuid
from collections.abc import Callable, Iterable, Iterator, Sequence
from dataclasses import dataclass, field
from datetime import UTC, datetime
from typing import Any

import numpy as np

TOKEN_PREFIX = "plb_"
SCOPES = ("submit", "read", "admin")


def utcnow() -> datetime:
    return datetime.now(UTC)


def new_id() -> str:
    return uuid.uuid4().hex


def hash_token(token: str) -> str:
    """The SHA-256 of a token's secret: all the store keeps of it."""
    return hashlib.sha256(token.encode("utf-8")).hexdigest()


# ---------------------------------------------------------------------------------------------
# Assessments


@dataclass(frozen=True)
class SeriesInput:
    """The numbers one series was assessed on (training arrays as sent, holdout if any) and
    its burn-in."""

    series_id: str
    weight: float | None
    actuals: np.ndarray
    fitted: np.ndarray
    timestamps: list[str] | None = None
    holdout_actuals: np.ndarray | None = None
    holdout_forecasts: np.ndarray | None = None
    holdout_lower: np.ndarray | None = None
    holdout_upper: np.ndarray | None = None
    holdout_level: float | None = None
    holdout_timestamps: list[str] | None = None
    burn_in: int = 0
    """Periods dropped at the start of the series before any check."""


@dataclass(frozen=True)
class AssessmentSummary:
    """A row of the assessments list."""

    seq: int
    id: str
    created_at: datetime
    model: str
    version: str
    verdict: str
    n_series: int
    n_failed: int
    n_warned: int
    policy_name: str
    policy_version: int

    def to_dict(self) -> dict[str, Any]:
        return {
            "id": self.id,
            "created_at": self.created_at.isoformat(),
            "model": self.model,
            "version": self.version,
            "verdict": self.verdict,
            "n_series": self.n_series,
            "n_failed": self.n_failed,
            "n_warned": self.n_warned,
            "policy": {"name": self.policy_name, "version": self.policy_version},
        }


@dataclass(frozen=True)
class ModelSummary:
    """One model of the estate: its newest assessment, how many it has and of how many
    versions."""

    latest: AssessmentSummary
    n_assessments: int
    n_versions: int


@dataclass(frozen=True)
class StoredAssessment:
    """A stored assessment: ``head`` is the result without its series (JSON bytes), ``series``
    the JSON bytes of each series' result in input order, ``verdicts`` their verdicts."""

    summary: AssessmentSummary
    head: bytes
    series: list[bytes]
    verdicts: list[str] = field(default_factory=list)
    """Each series' verdict, in the order of ``series``."""

    def to_json(self) -> bytes:
        """The full result as the POST returned it, without re-encoding the stored JSON."""
        head = self.head
        assert head.endswith(b"}")
        glue = b"," if len(head) > 2 else b""
        return head[:-1] + glue + b'"series":[' + b",".join(self.series) + b"]}"


@dataclass(frozen=True)
class StoredHead:
    """A stored assessment without its series: its summary, ``head`` (the result without
    ``series``, JSON bytes) and the policy document that decided it."""

    summary: AssessmentSummary
    head: bytes
    policy_document: dict[str, Any]


@dataclass(frozen=True)
class SeriesResult:
    """One series' result, already encoded as the JSON the API returns."""

    series_id: str
    verdict: str
    n_obs: int
    json: bytes


@dataclass(frozen=True)
class SeriesParts:
    """The series rows and inputs of an assessment, made part by part in input order:
    ``make()`` yields ``(results, inputs)`` of consecutive series, ``n_series`` in all."""

    n_series: int
    make: Callable[[], Iterator[tuple[Sequence[SeriesResult], Sequence[SeriesInput]]]]


@dataclass(frozen=True)
class NewAssessment:
    """Everything ``save_assessments`` writes for one assessment.

    ``head`` is the JSON of the result without ``series``; ``series`` the per-series results in
    input order, ``inputs`` the numbers they were computed from.
    """

    assessment_id: str
    created_at: datetime
    model: str
    version: str
    verdict: str
    n_failed: int
    n_warned: int
    policy_name: str
    policy_version: int
    policy_document: dict[str, Any]
    head: bytes
    series: Sequence[SeriesResult]
    inputs: Sequence[SeriesInput]
    idempotency_key: str | None = None
    body_hash: str | None = None
    parts: SeriesParts | None = None
    """A big fleet's series rows and inputs made part by part while they are written (then
    ``series`` and ``inputs`` are empty): none of them is held whole."""

    @property
    def n_series(self) -> int:
        return len(self.series) if self.parts is None else self.parts.n_series

    def summary(self, seq: int) -> AssessmentSummary:
        return AssessmentSummary(
            seq=seq,
            id=self.assessment_id,
            created_at=self.created_at,
            model=self.model,
            version=self.version,
            verdict=self.verdict,
            n_series=self.n_series,
            n_failed=self.n_failed,
            n_warned=self.n_warned,
            policy_name=self.policy_name,
            policy_version=self.policy_version,
        )


@dataclass(frozen=True)
class IdempotencyRecord:
    key: str
    body_hash: str
    assessment_seq: int


# ---------------------------------------------------------------------------------------------
# Policies and tokens


@dataclass(frozen=True)
class StoredPolicy:
    name: str
    version: int
    document: dict[str, Any]
    created_at: datetime

    def to_dict(self) -> dict[str, Any]:
        return {
            "name": self.name,
            "version": self.version,
            "created_at": self.created_at.isoformat(),
            "document": self.document,
        }


@dataclass(frozen=True)
class StoredToken:
    id: str
    scopes: tuple[str, ...]
    label: str
    created_at: datetime
    revoked_at: datetime | None

    def to_dict(self) -> dict[str, Any]:
        return {
            "id": self.id,
            "scopes": list(self.scopes),
            "label": self.label,
            "created_at": self.created_at.isoformat(),
            "revoked_at": None if self.revoked_at is None else self.revoked_at.isoformat(),
        }


# ---------------------------------------------------------------------------------------------
# Jobs

JOB_STATES = ("queued", "running", "done", "failed")


@dataclass(frozen=True)
class NewJob:
    """Everything ``create_job`` writes: the job's own fields and its compact input."""

    job_id: str
    created_at: datetime
    model: str
    version: str
    n_series: int
    input: bytes
    policy_document: dict[str, Any]
    assessment_id: str
    idempotency_key: str | None = None
    body_hash: str | None = None
    input_parts: Iterable[bytes] = ()
    """The input as sent, in parts of a few MiB (a big Parquet upload), written with the job
    and read back by ``Store.job_input_parts``; ``input`` then describes it."""


@dataclass(frozen=True)
class StoredJob:
    """A job as ``GET /v1/jobs/{id}`` shows it (without its input). ``error`` is the
    problem document of a failed job."""

    id: str
    state: str
    created_at: datetime
    started_at: datetime | None
    updated_at: datetime
    finished_at: datetime | None
    model: str
    version: str
    n_series: int
    series_done: int
    assessment_id: str
    error: dict[str, Any] | None
    attempts: int
    idempotency_key: str | None
    body_hash: str | None


@dataclass(frozen=True)
class ClaimedJob:
    """A job a worker has taken: run it, renew its lease with ``claim``, then finish it."""

    job: StoredJob
    claim: str
    input: bytes
    policy_document: dict[str, Any]
