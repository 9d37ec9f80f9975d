"""The jobs table on SQLite and PostgreSQL: claiming, leases, fencing, one transaction to end.

Every record here is invented. Leases are given as a millionth of a second where a test needs
one expired: nothing waits for a clock.
"""

from __future__ import annotations

import threading

import pytest
from sqlalchemy import text

from service.store import make_store
from service.store.port import IdempotencyConflict, JobLost
from service.store.records import NewJob, new_id, utcnow

from .test_port import record

HANG_GUARD_SECONDS = 60.0
EXPIRED = 1e-6


def new_job(key: str | None = None, body_hash: str | None = None, n: int = 3) -> NewJob:
    return NewJob(
        job_id=new_id(),
        created_at=utcnow(),
        model="orchard-yield",
        version="7",
        n_series=n,
        input=b"\x00invented input\xff",
        policy_document={"name": "default", "version": 1},
        assessment_id=new_id(),
        idempotency_key=key,
        body_hash=body_hash,
    )


@pytest.fixture
def store(migrated_url: str):
    s = make_store(migrated_url)
    yield s
    s.close()


def test_a_job_is_queued_claimed_and_finished_with_its_assessment(store):
    made = store.create_job(new_job())
    assert made.state == "queued" and made.attempts == 0 and made.series_done == 0
    claimed = store.claim_job(worker="w1", lease_seconds=60)
    assert claimed is not None and claimed.job.id == made.id
    assert claimed.input == b"\x00invented input\xff"
    assert claimed.policy_document == {"name": "default", "version": 1}
    assert claimed.job.state == "running" and claimed.job.attempts == 1
    assert store.claim_job(worker="w2", lease_seconds=60) is None  # held, lease not expired

    assert store.renew_job(job_id=made.id, claim=claimed.claim, lease_seconds=60, series_done=2)
    assert store.get_job(job_id=made.id).series_done == 2

    done = store.finish_job(job_id=made.id, claim=claimed.claim, record=record(made.assessment_id))
    assert done.state == "done" and done.series_done == 3 and done.finished_at is not None
    assert store.get_assessment(assessment_id=made.assessment_id) is not None
    assert store.claim_job(worker="w2", lease_seconds=60) is None


def test_oldest_first(store):
    first, second = store.create_job(new_job()), store.create_job(new_job())
    assert store.claim_job(worker="w", lease_seconds=60).job.id == first.id
    assert store.claim_job(worker="w", lease_seconds=60).job.id == second.id


def test_an_expired_lease_is_taken_over_and_the_first_worker_writes_nothing(store):
    made = store.create_job(new_job())
    stale = store.claim_job(worker="w1", lease_seconds=EXPIRED)
    fresh = store.claim_job(worker="w2", lease_seconds=60)
    assert fresh is not None and fresh.job.id == made.id and fresh.job.attempts == 2
    assert fresh.claim != stale.claim
    # The first worker comes back: none of its writes land.
    assert not store.renew_job(job_id=made.id, claim=stale.claim, lease_seconds=60)
    with pytest.raises(JobLost):
        store.finish_job(job_id=made.id, claim=stale.claim, record=record(made.assessment_id))
    assert store.get_assessment(assessment_id=made.assessment_id) is None  # rolled back
    assert not store.fail_job(job_id=made.id, claim=stale.claim, error={"status": 500})
    assert not store.link_job(job_id=made.id, claim=stale.claim, assessment_id="x")
    assert store.get_job(job_id=made.id).state == "running"
    store.finish_job(job_id=made.id, claim=fresh.claim, record=record(made.assessment_id))
    assert store.get_job(job_id=made.id).state == "done"


def test_failure_is_kept_with_the_job(store):
    made = store.create_job(new_job())
    claimed = store.claim_job(worker="w1", lease_seconds=60)
    problem = {"type": "urn:plumbline:problem:internal-error", "status": 500, "detail": "x"}
    assert store.fail_job(job_id=made.id, claim=claimed.claim, error=problem)
    failed = store.get_job(job_id=made.id)
    assert failed.state == "failed" and failed.error == problem
    assert store.claim_job(worker="w2", lease_seconds=60) is None  # not run again


def test_released_job_is_queued_again(store):
    made = store.create_job(new_job())
    claimed = store.claim_job(worker="w1", lease_seconds=60)
    assert store.release_job(job_id=made.id, claim=claimed.claim)
    assert store.get_job(job_id=made.id).state == "queued"
    assert store.claim_job(worker="w2", lease_seconds=60).job.attempts == 2


def test_idempotency_key_is_one_job(store):
    made = store.create_job(new_job(key="nightly-7", body_hash="h1"))
    with pytest.raises(IdempotencyConflict):
        store.create_job(new_job(key="nightly-7", body_hash="h2"))
    assert store.find_job_by_key(key="nightly-7").id == made.id
    assert store.find_job_by_key(key="other") is None


def test_a_key_stored_meanwhile_by_an_assessment_is_a_conflict(store):
    made = store.create_job(new_job(key="k", body_hash="digest-a1"))
    store.save_assessments([record("a1", key="k")])
    claimed = store.claim_job(worker="w1", lease_seconds=60)
    with pytest.raises(IdempotencyConflict):
        store.finish_job(job_id=made.id, claim=claimed.claim, record=record("a2", key="k"))
    assert store.get_job(job_id=made.id).state == "running"  # nothing of it was written
    assert store.link_job(job_id=made.id, claim=claimed.claim, assessment_id="a1")
    assert store.get_job(job_id=made.id).assessment_id == "a1"


def test_skip_locked_on_postgresql(store, migrated_url):
    """A worker claiming while another holds the oldest job's row lock (mid-claim) takes the
    next job at once instead of waiting for the lock: ``FOR UPDATE SKIP LOCKED``."""
    if not migrated_url.startswith("postgresql"):
        pytest.skip("row locks are PostgreSQL's")
    first, second = store.create_job(new_job()), store.create_job(new_job())
    other = make_store(migrated_url)
    try:
        with other.engine.connect() as holder:
            holder.execute(text("SELECT id FROM jobs WHERE id = :id FOR UPDATE"), {"id": first.id})
            got: list = []
            thread = threading.Thread(
                target=lambda: got.append(store.claim_job(worker="w2", lease_seconds=60))
            )
            thread.start()
            thread.join(HANG_GUARD_SECONDS)  # without SKIP LOCKED it would wait on the lock
            assert not thread.is_alive(), "the claim waited on a locked row"
            assert got[0] is not None and got[0].job.id == second.id
            holder.rollback()
    finally:
        other.close()
    assert store.claim_job(worker="w3", lease_seconds=60).job.id == first.id


def test_concurrent_claims_never_share_a_job(store, migrated_url):
    """Four threads with stores of their own claim 40 jobs at once: each job once."""
    made = {store.create_job(new_job()).id for _ in range(40)}
    taken: list[str] = []
    lock = threading.Lock()

    def drain() -> None:
        mine = make_store(migrated_url)
        try:
            while (claimed := mine.claim_job(worker="w", lease_seconds=60)) is not None:
                with lock:
                    taken.append(claimed.job.id)
        finally:
            mine.close()

    threads = [threading.Thread(target=drain) for _ in range(4)]
    for t in threads:
        t.start()
    for t in threads:
        t.join(HANG_GUARD_SECONDS)
    assert sorted(taken) == sorted(made)
