"""Repository functions of the jobs table (``Store.create_job`` and the rest call them).

A worker takes the oldest job that is queued, or running under a lease that has expired (its
worker died or hung), with :func:`claim_job`: on PostgreSQL ``SELECT ... FOR UPDATE SKIP
LOCKED``, so workers claiming at the same moment each get a different job without waiting on
each other; on SQLite under the file's write lock. Either way the claim is a compare-and-set
on the row's state, lease and previous claim, and every later write of the worker (progress,
lease renewal, the result) names its ``claim``: a worker whose lease was taken over writes
nothing more. :func:`finish_job` stores the assessment and marks the job done in one
transaction, so after a crash either both are there or neither.
"""

from __future__ import annotations

import weakref
from collections.abc import Iterator, Sequence
from datetime import datetime, timedelta
from typing import Any, cast

import orjson
from sqlalchemy import Engine, Table, and_, bindparam, delete, insert, or_, select, update
from sqlalchemy.exc import IntegrityError

from . import fastpath
from .models import JobInputPartRow, JobRow
from .port import IdempotencyConflict, JobLost
from .records import ClaimedJob, NewAssessment, NewJob, StoredJob, new_id, utcnow
from .repository import _aware, _write_all, find_idempotency_key
from .writelock import write_lock

J = cast(Table, JobRow.__table__)
JP = cast(Table, JobInputPartRow.__table__)

_VIEW = (
    J.c.id,
    J.c.state,
    J.c.created_at,
    J.c.started_at,
    J.c.updated_at,
    J.c.finished_at,
    J.c.model,
    J.c.version,
    J.c.n_series,
    J.c.series_done,
    J.c.assessment_id,
    J.c.error,
    J.c.attempts,
    J.c.idempotency_key,
    J.c.body_hash,
)


def _maybe(value: datetime | None) -> datetime | None:
    return None if value is None else _aware(value)


def _job(row: Any) -> StoredJob:
    return StoredJob(
        id=row.id,
        state=row.state,
        created_at=_aware(row.created_at),
        started_at=_maybe(row.started_at),
        updated_at=_aware(row.updated_at),
        finished_at=_maybe(row.finished_at),
        model=row.model,
        version=row.version,
        n_series=row.n_series,
        series_done=row.series_done,
        assessment_id=row.assessment_id,
        error=None if row.error is None else orjson.loads(row.error),
        attempts=row.attempts,
        idempotency_key=row.idempotency_key,
        body_hash=row.body_hash,
    )


def create_job(engine: Engine, job: NewJob) -> StoredJob:
    """Write a queued job; :class:`IdempotencyConflict` when its key is already a job's."""
    values = {
        "id": job.job_id,
        "state": "queued",
        "created_at": job.created_at,
        "updated_at": job.created_at,
        "model": job.model,
        "version": job.version,
        "n_series": job.n_series,
        "series_done": 0,
        "input": job.input,
        "policy_document": orjson.dumps(job.policy_document).decode(),
        "idempotency_key": job.idempotency_key,
        "body_hash": job.body_hash,
        "assessment_id": job.assessment_id,
        "attempts": 0,
    }
    try:
        with write_lock(engine), engine.begin() as conn:
            conn.execute(insert(J), values)
            # The parts one statement each: a part's bytes are dropped once written.
            for position, data in enumerate(job.input_parts):
                conn.execute(insert(JP), {"job_id": job.job_id, "position": position, "data": data})
    except IntegrityError:
        if job.idempotency_key is not None and find_job_by_key(engine, key=job.idempotency_key):
            raise IdempotencyConflict(job.idempotency_key) from None
        raise
    found = get_job(engine, job_id=job.job_id)
    assert found is not None
    return found


def get_job(engine: Engine, *, job_id: str) -> StoredJob | None:
    with engine.connect() as conn:
        row = conn.execute(select(*_VIEW).where(J.c.id == job_id)).first()
    return None if row is None else _job(row)


def job_input_parts(engine: Engine, *, job_id: str) -> Iterator[bytes]:
    """The parts of a job's input as sent, in order, one read at a time (none for a job whose
    input is whole in ``jobs.input``)."""
    with engine.connect() as conn:
        count = conn.execute(
            select(JP.c.position).where(JP.c.job_id == job_id).order_by(JP.c.position.desc())
        ).first()
    for position in range(0 if count is None else count.position + 1):
        with engine.connect() as conn:
            data = conn.execute(
                select(JP.c.data).where(JP.c.job_id == job_id, JP.c.position == position)
            ).scalar()
        if data is None:
            raise ValueError(f"part {position} of the input of job {job_id} is missing")
        yield bytes(data)


def find_job_by_key(engine: Engine, *, key: str) -> StoredJob | None:
    with engine.connect() as conn:
        row = conn.execute(select(*_VIEW).where(J.c.idempotency_key == key)).first()
    return None if row is None else _job(row)


def _takeable(now: datetime) -> Any:
    return or_(
        J.c.state == "queued",
        and_(J.c.state == "running", J.c.lease_expires_at < now),
    )


def claim_job(engine: Engine, *, worker: str, lease_seconds: float) -> ClaimedJob | None:
    """Take the oldest queued job, or the oldest running one whose lease has expired, for
    ``lease_seconds``; ``None`` when there is none free."""
    now = utcnow()
    find = select(J.c.id, J.c.state, J.c.claim).where(_takeable(now)).order_by(J.c.seq).limit(1)
    if engine.dialect.name == "postgresql":
        find = find.with_for_update(skip_locked=True)
    claim = new_id()
    if engine.dialect.name != "postgresql":
        # An idle worker looks without the write lock, which it takes only to claim.
        with engine.connect() as conn:
            if conn.execute(select(J.c.id).where(_takeable(now)).limit(1)).first() is None:
                return None
    with write_lock(engine), engine.begin() as conn:
        row = conn.execute(find).first()
        if row is None:
            return None
        taken = conn.execute(
            update(J)
            .where(
                J.c.id == row.id,
                J.c.state == row.state,
                J.c.claim.is_(None) if row.claim is None else J.c.claim == row.claim,
                _takeable(now),
            )
            .values(
                state="running",
                worker=worker[:200],
                claim=claim,
                lease_expires_at=now + timedelta(seconds=lease_seconds),
                started_at=now,
                updated_at=now,
                attempts=J.c.attempts + 1,
            )
        )
        if taken.rowcount != 1:  # taken meanwhile (SQLite without row locks): try again later
            return None
        full = conn.execute(
            select(*_VIEW, J.c.input, J.c.policy_document).where(J.c.id == row.id)
        ).one()
    return ClaimedJob(
        job=_job(full),
        claim=claim,
        input=bytes(full.input),
        policy_document=orjson.loads(full.policy_document),
    )


def _mine(job_id: str, claim: str) -> Any:
    return and_(J.c.id == job_id, J.c.claim == claim, J.c.state == "running")


def renew_job(
    engine: Engine,
    *,
    job_id: str,
    claim: str,
    lease_seconds: float,
    series_done: int | None = None,
) -> bool:
    """Extend the lease (and record progress); ``False`` when the job is no longer ours."""
    now = utcnow()
    values: dict[str, Any] = {
        "lease_expires_at": now + timedelta(seconds=lease_seconds),
        "updated_at": now,
    }
    if series_done is not None:
        values["series_done"] = series_done
    with write_lock(engine), engine.begin() as conn:
        done = conn.execute(update(J).where(_mine(job_id, claim)).values(**values))
    return bool(done.rowcount)


def _done_values(now: datetime, assessment_id: str) -> dict[str, Any]:
    return {
        "state": "done",
        "series_done": J.c.n_series,
        "finished_at": now,
        "updated_at": now,
        "assessment_id": assessment_id,
        "input": None,
        "claim": None,
        "lease_expires_at": None,
    }


class _Finish:
    """The compiled "mark done" statement of one engine, run inside the assessment's write."""

    def __init__(self, engine: Engine) -> None:
        stmt = (
            update(J)
            .where(
                J.c.id == bindparam("job_id"),
                J.c.claim == bindparam("job_claim"),
                J.c.state == "running",
            )
            .values(
                state="done",
                series_done=J.c.n_series,
                finished_at=bindparam("now"),
                updated_at=bindparam("now"),
                input=None,
                claim=None,
                lease_expires_at=None,
            )
        )
        self.statement = fastpath.compile_statement(
            engine, stmt, J, ["job_id", "job_claim", "now"], types={"now": J.c.updated_at.type}
        )
        self.drop_parts = fastpath.compile_statement(
            engine, delete(JP).where(JP.c.job_id == bindparam("job_id")), JP, ["job_id"]
        )


_FINISH: weakref.WeakKeyDictionary[Engine, _Finish] = weakref.WeakKeyDictionary()


def finish_job(engine: Engine, *, job_id: str, claim: str, record: NewAssessment) -> StoredJob:
    """Store ``record`` and mark the job done in one transaction.

    Raises :class:`JobLost` (nothing written) when the job is no longer this claim's, and
    :class:`IdempotencyConflict` when its key was stored meanwhile by another assessment.
    """
    made = _FINISH.get(engine)
    if made is None:
        made = _FINISH[engine] = _Finish(engine)
    finish = made.statement
    now = utcnow()

    def then(cursor: Any, _seqs: Sequence[int]) -> None:
        cursor.execute(
            finish.sql, finish.params({"job_id": job_id, "job_claim": claim, "now": now})
        )
        if cursor.rowcount != 1:
            raise JobLost(job_id)
        cursor.execute(made.drop_parts.sql, made.drop_parts.params({"job_id": job_id}))

    stmts = fastpath.statements(engine)
    try:
        _write_all(engine, [record], then=then)
    except stmts.integrity_error:
        key = record.idempotency_key
        if key is not None and find_idempotency_key(engine, key=key) is not None:
            raise IdempotencyConflict(key) from None
        raise
    found = get_job(engine, job_id=job_id)
    assert found is not None
    return found


def link_job(engine: Engine, *, job_id: str, claim: str, assessment_id: str) -> bool:
    """Mark the job done with an assessment already stored (its key's); ``False`` when the job
    is no longer this claim's."""
    with write_lock(engine), engine.begin() as conn:
        done = conn.execute(
            update(J).where(_mine(job_id, claim)).values(**_done_values(utcnow(), assessment_id))
        )
        if done.rowcount:
            conn.execute(delete(JP).where(JP.c.job_id == job_id))
    return bool(done.rowcount)


def fail_job(engine: Engine, *, job_id: str, claim: str, error: dict[str, Any]) -> bool:
    """Mark the job failed with ``error`` (a problem document); its input is kept."""
    now = utcnow()
    with write_lock(engine), engine.begin() as conn:
        done = conn.execute(
            update(J)
            .where(_mine(job_id, claim))
            .values(
                state="failed",
                error=orjson.dumps(error).decode(),
                finished_at=now,
                updated_at=now,
                claim=None,
                lease_expires_at=None,
            )
        )
    return bool(done.rowcount)


def release_job(engine: Engine, *, job_id: str, claim: str) -> bool:
    """Give a running job back to the queue (a worker stopping before it finished)."""
    now = utcnow()
    with write_lock(engine), engine.begin() as conn:
        done = conn.execute(
            update(J)
            .where(_mine(job_id, claim))
            .values(state="queued", claim=None, worker=None, lease_expires_at=None, updated_at=now)
        )
    return bool(done.rowcount)
