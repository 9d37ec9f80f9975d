"""The storage port: every read and write the API makes, and the store's own exceptions.

The API talks to a :class:`Store` and nothing else of the database: no engine, no driver, no
driver error. An implementation (:class:`service.store.sql.SqlStore` over SQLAlchemy) turns what
its database raises into

* :class:`StoreUnavailable`: the database cannot be reached or written now (the server is gone
  or refuses connections, the file is read-only or its disk fails, a lock or pool wait timed
  out). Nothing was written; the same call may succeed later.
* :class:`StoreConflict`: the write collides with what is stored (an idempotency key already
  taken, see :class:`IdempotencyConflict`). Nothing of it was written.
* :class:`StoreError`: any other failure of the database (a bug, a broken constraint).

Exceptions that are not the database's (a bad argument, a failing callback) pass through as
they are.
"""

from __future__ import annotations

from abc import ABC, abstractmethod
from collections.abc import Callable, Iterator, Sequence
from dataclasses import dataclass
from datetime import datetime
from typing import Any

from .records import (
    AssessmentSummary,
    ClaimedJob,
    IdempotencyRecord,
    ModelSummary,
    NewAssessment,
    NewJob,
    SeriesInput,
    StoredAssessment,
    StoredHead,
    StoredJob,
    StoredPolicy,
    StoredToken,
)

__all__ = [
    "IdempotencyConflict",
    "JobLost",
    "Readiness",
    "Store",
    "StoreConflict",
    "StoreError",
    "StoreUnavailable",
]


class StoreError(Exception):
    """The database failed on a store operation (not an outage: a bug or a constraint).

    ``kind`` names the database's own error (``"IntegrityError"``), for logs and probes.
    """

    def __init__(self, message: str, *, kind: str = "") -> None:
        super().__init__(message)
        self.kind = kind or type(self).__name__


class StoreUnavailable(StoreError):
    """The database cannot be reached or written now; nothing was written, retry later."""


class StoreConflict(StoreError):
    """A write refused because it collides with what is already stored."""


class IdempotencyConflict(StoreConflict):
    """The idempotency key was already used (stored by another assessment)."""

    def __init__(self, key: str) -> None:
        super().__init__(f"idempotency key {key!r} is already stored", kind="IntegrityError")
        self.key = key


class JobLost(StoreConflict):
    """The job is no longer the caller's: its lease expired and another worker took it (or it
    was finished meanwhile). Nothing of the write was written."""

    def __init__(self, job_id: str) -> None:
        super().__init__(f"job {job_id!r} is no longer held by this worker", kind="JobLost")
        self.job_id = job_id


@dataclass(frozen=True)
class Readiness:
    """What the readiness probe found: the backend's name and the schema revisions."""

    backend: str
    schema_revision: str | None
    head_revision: str

    @property
    def migrated(self) -> bool:
        return self.schema_revision == self.head_revision


class Store(ABC):
    """Every operation of the service on its storage, keyword arguments only.

    Methods block (call them from a worker thread, not the event loop) and raise the
    exceptions of this module for the database's failures.
    """

    # --- Assessments ---------------------------------------------------------------------

    @abstractmethod
    def save_assessments(
        self, records: Sequence[NewAssessment]
    ) -> list[AssessmentSummary | Exception]:
        """Write several assessments, each whole with its series rows, inputs and key.

        Raises :class:`StoreUnavailable` (or :class:`StoreError`) when none was written.
        When only some could be written, each record's own outcome is returned in its place:
        its summary, an :class:`IdempotencyConflict`, or the error that kept it out.
        """

    @abstractmethod
    def get_assessment(
        self, *, assessment_id: str, flagged_only: bool = False
    ) -> StoredAssessment | None:
        """The stored assessment with this id and its per-series results, or ``None``; with
        ``flagged_only``, only the results of the series that did not pass (then ``to_json``
        is not the whole document: join ``head`` and ``series`` as the flagged view does)."""

    @abstractmethod
    def get_assessment_by_seq(self, *, seq: int) -> StoredAssessment | None:
        """The stored assessment with this sequence number, or ``None``."""

    @abstractmethod
    def list_assessments(
        self,
        *,
        model: str | None = None,
        version: str | None = None,
        verdict: str | None = None,
        since: datetime | None = None,
        until: datetime | None = None,
        before_seq: int | None = None,
        limit: int = 50,
    ) -> list[AssessmentSummary]:
        """Summaries, newest first; ``before_seq`` continues a page (the cursor)."""

    @abstractmethod
    def latest_assessment(
        self, *, model: str, version: str | None = None
    ) -> AssessmentSummary | None:
        """The newest assessment of ``model`` (and ``version``), or ``None``."""

    @abstractmethod
    def latest_passing_assessment(
        self, *, model: str, exclude_version: str | None = None
    ) -> AssessmentSummary | None:
        """The newest assessment of ``model`` that is the latest of its version and passed,
        leaving out ``exclude_version`` (a baseline's ``latest-pass``), or ``None``."""

    @abstractmethod
    def assessment_head(self, *, assessment_id: str) -> StoredHead | None:
        """The stored assessment without its series (its summary, the result's head and the
        policy document that decided it), or ``None`` when there is no such id."""

    @abstractmethod
    def list_models(self, *, verdict: str | None = None) -> list[ModelSummary]:
        """Every model with its newest assessment and counts, by name (``verdict``: only the
        models whose newest verdict it is)."""

    @abstractmethod
    def assessment_heads(self, *, seqs: Sequence[int]) -> dict[int, bytes]:
        """The stored result without its series (JSON bytes) of each of these assessments,
        by sequence number (one missing from the answer is not stored)."""

    @abstractmethod
    def series_inputs(self, *, assessment_id: str) -> list[SeriesInput] | None:
        """The stored input arrays of every series, in input order (``None``: no such id)."""

    @abstractmethod
    def find_idempotency_key(self, *, key: str) -> IdempotencyRecord | None:
        """The stored use of an idempotency key, or ``None``."""

    # --- Jobs ----------------------------------------------------------------------------

    @abstractmethod
    def create_job(self, job: NewJob) -> StoredJob:
        """Write a queued job; :class:`IdempotencyConflict` when its key is a job's already."""

    @abstractmethod
    def get_job(self, *, job_id: str) -> StoredJob | None:
        """The job with this id (without its input), or ``None``."""

    @abstractmethod
    def job_input_parts(self, *, job_id: str) -> Iterator[bytes]:
        """The parts of a job's input as sent (``NewJob.input_parts``), in order, read one at
        a time; none when the job's input is whole."""

    @abstractmethod
    def find_job_by_key(self, *, key: str) -> StoredJob | None:
        """The job submitted with this idempotency key, or ``None``."""

    @abstractmethod
    def claim_job(self, *, worker: str, lease_seconds: float) -> ClaimedJob | None:
        """Take the oldest queued job (or running one whose lease expired) for
        ``lease_seconds``, for ``worker``; ``None`` when none is free. Two workers never hold
        the same job at once."""

    @abstractmethod
    def renew_job(
        self, *, job_id: str, claim: str, lease_seconds: float, series_done: int | None = None
    ) -> bool:
        """Extend the claim's lease and record progress; ``False``: the job is not ours."""

    @abstractmethod
    def finish_job(self, *, job_id: str, claim: str, record: NewAssessment) -> StoredJob:
        """Store the job's assessment and mark it done, in one transaction. Raises
        :class:`JobLost` (nothing written) when the claim lost the job, and
        :class:`IdempotencyConflict` when the job's key was stored meanwhile."""

    @abstractmethod
    def link_job(self, *, job_id: str, claim: str, assessment_id: str) -> bool:
        """Mark the job done with an assessment stored already; ``False``: not ours."""

    @abstractmethod
    def fail_job(self, *, job_id: str, claim: str, error: dict[str, Any]) -> bool:
        """Mark the job failed with ``error`` (a problem document); ``False``: not ours."""

    @abstractmethod
    def release_job(self, *, job_id: str, claim: str) -> bool:
        """Put a running job back in the queue; ``False``: not ours."""

    # --- Policies ------------------------------------------------------------------------

    @abstractmethod
    def save_policy(
        self, *, name: str, document: dict[str, Any], first_version: int = 1
    ) -> StoredPolicy:
        """Store ``document`` as the next version of policy ``name`` (``first_version`` if
        new); the stored document carries its ``name`` and assigned ``version``."""

    @abstractmethod
    def get_policy(self, *, name: str, version: int | None = None) -> StoredPolicy | None:
        """Version ``version`` of policy ``name`` (default: the newest), or ``None``."""

    @abstractmethod
    def latest_policy_document(self, *, name: str) -> tuple[int, dict[str, Any]] | None:
        """``(version, document)`` of the newest version of policy ``name``, or ``None``."""

    @abstractmethod
    def list_policies(self) -> list[StoredPolicy]:
        """The newest version of every stored policy, by name."""

    # --- Tokens --------------------------------------------------------------------------

    @abstractmethod
    def create_token(self, *, scopes: Sequence[str], label: str = "") -> tuple[StoredToken, str]:
        """Mint a token: its record and its secret (shown once; only its hash is kept)."""

    @abstractmethod
    def find_token(self, *, secret: str) -> StoredToken | None:
        """The live (not revoked) token whose secret is ``secret``, or ``None``."""

    @abstractmethod
    def revoke_token(self, *, token_id: str) -> bool:
        """Revoke a token; ``False`` when no live token has that id."""

    @abstractmethod
    def list_tokens(self) -> list[StoredToken]:
        """Every token (never a secret), oldest first."""

    @abstractmethod
    def count_tokens(self) -> int:
        """Tokens ever created (revoked ones included)."""

    # --- Server secrets ------------------------------------------------------------------

    @abstractmethod
    def get_or_create_secret(self, *, name: str, make: Callable[[], str]) -> str:
        """The secret kept under ``name``; on first use ``make()`` creates it and it is kept
        (one value for every process sharing the store)."""

    # --- Health and life cycle -----------------------------------------------------------

    @abstractmethod
    def readiness(self) -> Readiness:
        """Probe the store: it must answer and take a write. Raises
        :class:`StoreUnavailable` when it does not (whatever the database's error)."""

    @abstractmethod
    def migrate(self) -> None:
        """Bring the schema to the revision this build needs."""

    @abstractmethod
    def close(self) -> None:
        """Release the store's connections (it may be used again afterwards)."""
