"""The :class:`~service.store.port.Store` over SQLAlchemy: SQLite or PostgreSQL.

:class:`SqlStore` owns its engine. Each operation runs the repository function of the same name
(:mod:`service.store.repository`) and turns the errors of SQLAlchemy and of the DBAPI driver
into the port's exceptions (:mod:`service.store.outages` tells an outage from a bug). When an
outage was met straight on a pooled DBAPI connection (the hot path of saving), the pool is
dropped: SQLite keeps a connection opened on a read-only file read-only, and without dropping it
the store would refuse writes long after the file is writable again.

The readiness probe is a round trip and, on SQLite, a committed write: a read-only file answers
``SELECT 1`` as well as a writable one.
"""

from __future__ import annotations

import functools
from collections.abc import Callable, Iterator, Sequence
from datetime import datetime
from typing import Any, TypeVar

from sqlalchemy import Engine, event, text

from . import jobs
from . import repository as repo
from .engine import make_engine
from .migrate import current_revision, head_revision, upgrade_engine
from .outages import DriverErrors, drop_broken_connections, sqlite_code
from .port import Readiness, Store, StoreError, StoreUnavailable
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

__all__ = ["SqlStore", "make_store"]

F = TypeVar("F", bound=Callable[..., Any])


def _translated(method: F) -> F:
    """Run ``method`` with the database's errors raised as the port's."""

    @functools.wraps(method)
    def call(self: SqlStore, *args: Any, **kwargs: Any) -> Any:
        try:
            return method(self, *args, **kwargs)
        except self._errors.types as exc:
            raise self._failure(exc) from exc

    return call  # type: ignore[return-value]


class SqlStore(Store):
    """The store on ``engine`` (which it owns: :meth:`close` disposes of it)."""

    def __init__(self, engine: Engine) -> None:
        self.engine = engine
        self._errors = DriverErrors(engine)
        if not event.contains(engine, "handle_error", drop_broken_connections):
            event.listen(engine, "handle_error", drop_broken_connections)

    def __repr__(self) -> str:
        return f"SqlStore({self.engine.url.render_as_string(hide_password=True)!r})"

    def _failure(self, exc: BaseException) -> StoreError:
        """The port's exception for a database error (chain the original to it)."""
        code = sqlite_code(exc)
        kind = type(exc).__name__
        message = kind + (f" ({code})" if code else "")
        if not self._errors.is_outage(exc):
            return StoreError(message, kind=kind)
        if self._errors.is_raw(exc):
            # Met outside SQLAlchemy's execution layer, so no connection was dropped for it.
            self.engine.dispose()
        return StoreUnavailable(message, kind=kind)

    # --- Assessments ---------------------------------------------------------------------

    @_translated
    def save_assessments(
        self, records: Sequence[NewAssessment]
    ) -> list[AssessmentSummary | Exception]:
        saved = repo.save_assessments(self.engine, records)
        failures = self._errors.types
        out: list[AssessmentSummary | Exception] = []
        for outcome in saved:
            if isinstance(outcome, failures):
                failure = self._failure(outcome)
                failure.__cause__ = outcome
                outcome = failure
            out.append(outcome)
        return out

    @_translated
    def get_assessment(
        self, *, assessment_id: str, flagged_only: bool = False
    ) -> StoredAssessment | None:
        return repo.get_assessment(
            self.engine, assessment_id=assessment_id, flagged_only=flagged_only
        )

    @_translated
    def get_assessment_by_seq(self, *, seq: int) -> StoredAssessment | None:
        return repo.get_assessment_by_seq(self.engine, seq=seq)

    @_translated
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
        return repo.list_assessments(
            self.engine,
            model=model,
            version=version,
            verdict=verdict,
            since=since,
            until=until,
            before_seq=before_seq,
            limit=limit,
        )

    @_translated
    def latest_assessment(
        self, *, model: str, version: str | None = None
    ) -> AssessmentSummary | None:
        return repo.latest_assessment(self.engine, model=model, version=version)

    @_translated
    def latest_passing_assessment(
        self, *, model: str, exclude_version: str | None = None
    ) -> AssessmentSummary | None:
        return repo.latest_passing_assessment(
            self.engine, model=model, exclude_version=exclude_version
        )

    @_translated
    def assessment_head(self, *, assessment_id: str) -> StoredHead | None:
        return repo.assessment_head(self.engine, assessment_id=assessment_id)

    @_translated
    def list_models(self, *, verdict: str | None = None) -> list[ModelSummary]:
        return repo.list_models(self.engine, verdict=verdict)

    @_translated
    def assessment_heads(self, *, seqs: Sequence[int]) -> dict[int, bytes]:
        return repo.assessment_heads(self.engine, seqs=seqs)

    @_translated
    def series_inputs(self, *, assessment_id: str) -> list[SeriesInput] | None:
        return repo.series_inputs(self.engine, assessment_id=assessment_id)

    @_translated
    def find_idempotency_key(self, *, key: str) -> IdempotencyRecord | None:
        return repo.find_idempotency_key(self.engine, key=key)

    # --- Jobs ----------------------------------------------------------------------------

    @_translated
    def create_job(self, job: NewJob) -> StoredJob:
        return jobs.create_job(self.engine, job)

    @_translated
    def get_job(self, *, job_id: str) -> StoredJob | None:
        return jobs.get_job(self.engine, job_id=job_id)

    def job_input_parts(self, *, job_id: str) -> Iterator[bytes]:
        parts = jobs.job_input_parts(self.engine, job_id=job_id)
        while True:
            try:
                yield next(parts)
            except StopIteration:
                return
            except self._errors.types as exc:
                raise self._failure(exc) from exc

    @_translated
    def find_job_by_key(self, *, key: str) -> StoredJob | None:
        return jobs.find_job_by_key(self.engine, key=key)

    @_translated
    def claim_job(self, *, worker: str, lease_seconds: float) -> ClaimedJob | None:
        return jobs.claim_job(self.engine, worker=worker, lease_seconds=lease_seconds)

    @_translated
    def renew_job(
        self, *, job_id: str, claim: str, lease_seconds: float, series_done: int | None = None
    ) -> bool:
        return jobs.renew_job(
            self.engine,
            job_id=job_id,
            claim=claim,
            lease_seconds=lease_seconds,
            series_done=series_done,
        )

    @_translated
    def finish_job(self, *, job_id: str, claim: str, record: NewAssessment) -> StoredJob:
        return jobs.finish_job(self.engine, job_id=job_id, claim=claim, record=record)

    @_translated
    def link_job(self, *, job_id: str, claim: str, assessment_id: str) -> bool:
        return jobs.link_job(self.engine, job_id=job_id, claim=claim, assessment_id=assessment_id)

    @_translated
    def fail_job(self, *, job_id: str, claim: str, error: dict[str, Any]) -> bool:
        return jobs.fail_job(self.engine, job_id=job_id, claim=claim, error=error)

    @_translated
    def release_job(self, *, job_id: str, claim: str) -> bool:
        return jobs.release_job(self.engine, job_id=job_id, claim=claim)

    # --- Policies ------------------------------------------------------------------------

    @_translated
    def save_policy(
        self, *, name: str, document: dict[str, Any], first_version: int = 1
    ) -> StoredPolicy:
        return repo.save_policy(
            self.engine, name=name, document=document, first_version=first_version
        )

    @_translated
    def get_policy(self, *, name: str, version: int | None = None) -> StoredPolicy | None:
        return repo.get_policy(self.engine, name=name, version=version)

    @_translated
    def latest_policy_document(self, *, name: str) -> tuple[int, dict[str, Any]] | None:
        return repo.latest_policy_document(self.engine, name=name)

    @_translated
    def list_policies(self) -> list[StoredPolicy]:
        return repo.list_policies(self.engine)

    # --- Tokens --------------------------------------------------------------------------

    @_translated
    def create_token(self, *, scopes: Sequence[str], label: str = "") -> tuple[StoredToken, str]:
        return repo.create_token(self.engine, scopes=scopes, label=label)

    @_translated
    def find_token(self, *, secret: str) -> StoredToken | None:
        return repo.find_token(self.engine, secret=secret)

    @_translated
    def revoke_token(self, *, token_id: str) -> bool:
        return repo.revoke_token(self.engine, token_id=token_id)

    @_translated
    def list_tokens(self) -> list[StoredToken]:
        return repo.list_tokens(self.engine)

    @_translated
    def count_tokens(self) -> int:
        return repo.count_tokens(self.engine)

    # --- Server secrets ------------------------------------------------------------------

    @_translated
    def get_or_create_secret(self, *, name: str, make: Callable[[], str]) -> str:
        return repo.get_or_create_secret(self.engine, name=name, make=make)

    # --- Health and life cycle -----------------------------------------------------------

    def readiness(self) -> Readiness:
        try:
            self._probe()
            revision = current_revision(self.engine)
        except self._errors.types as exc:
            failure = self._failure(exc)
            # Whatever the database answered, it is not ready.
            raise StoreUnavailable(str(failure), kind=failure.kind) from exc
        return Readiness(
            backend=self.engine.dialect.name,
            schema_revision=revision,
            head_revision=head_revision(),
        )

    def _probe(self) -> None:
        with self.engine.connect() as conn:
            conn.execute(text("SELECT 1"))
            if self.engine.dialect.name == "sqlite":
                # Rewrite the header's user_version with its own value: a committed write that
                # changes nothing, refused at once by a read-only file or a failing disk.
                version = conn.execute(text("PRAGMA user_version")).scalar_one()
                conn.execute(text(f"PRAGMA user_version = {int(version)}"))
                conn.commit()

    @_translated
    def migrate(self) -> None:
        upgrade_engine(self.engine)

    def close(self) -> None:
        self.engine.dispose()


def make_store(url: str, **engine_options: Any) -> SqlStore:
    """The store at an SQLAlchemy URL (``sqlite:///...`` or ``postgresql+psycopg://...``);
    ``engine_options`` go to :func:`~service.store.engine.make_engine`."""
    return SqlStore(make_engine(url, **engine_options))
