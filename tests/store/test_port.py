"""The storage port on SQLite and PostgreSQL: the SQL store answers with the port's exceptions.

A database that cannot be written or reached raises :class:`StoreUnavailable` (never a driver
error), an idempotency key taken already is a :class:`StoreConflict`, and a failure that is no
outage (a table missing) a plain :class:`StoreError`. Every record here is invented.
"""

from __future__ import annotations

import socket
import subprocess
from pathlib import Path

import numpy as np
import pytest
from sqlalchemy.engine import make_url

from service.store import (
    IdempotencyConflict,
    SqlStore,
    Store,
    StoreConflict,
    StoreError,
    StoreUnavailable,
    make_store,
)
from service.store.migrate import head_revision
from service.store.records import NewAssessment, SeriesInput, SeriesResult, utcnow


def record(aid: str, key: str | None = None, n: int = 2) -> NewAssessment:
    """An invented assessment of ``n`` series of three periods."""
    return NewAssessment(
        assessment_id=aid,
        created_at=utcnow(),
        model="orchard-yield",
        version="7",
        verdict="pass",
        n_failed=0,
        n_warned=0,
        policy_name="default",
        policy_version=1,
        policy_document={"name": "default"},
        head=b'{"id":"' + aid.encode() + b'","verdict":"pass"}',
        series=[
            SeriesResult(
                series_id=f"row{i}",
                verdict="pass",
                n_obs=3,
                json=f'{{"id":"row{i}","verdict":"pass"}}'.encode(),
            )
            for i in range(n)
        ],
        inputs=[
            SeriesInput(
                series_id=f"row{i}",
                weight=None,
                actuals=np.array([4.0, 5.0, 6.0 + i]),
                fitted=np.array([4.5, 5.0, 5.5]),
            )
            for i in range(n)
        ],
        idempotency_key=key,
        body_hash=None if key is None else f"digest-{aid}",
    )


def closed_port() -> int:
    """A loopback port nothing listens on (bound, then released)."""
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


def out_of_reach(url: str) -> str:
    """The same database, out of the store's reach: an SQLite file opened read-only, a
    PostgreSQL server asked on a port where nothing listens."""
    parsed = make_url(url)
    if parsed.get_backend_name() == "sqlite":
        return f"sqlite:///file:{parsed.database}?mode=ro&uri=true"
    return parsed.set(port=closed_port()).render_as_string(hide_password=False)


@pytest.fixture
def store(migrated_url: str):
    made = make_store(migrated_url)
    yield made
    made.close()


def test_the_sql_store_is_a_store(store):
    assert isinstance(store, Store) and isinstance(store, SqlStore)
    ready = store.readiness()
    assert ready.migrated and ready.schema_revision == head_revision()
    assert ready.backend == make_url(str(store.engine.url)).get_backend_name()


def test_a_database_out_of_reach_is_unavailable(store, migrated_url):
    (saved,) = store.save_assessments([record("kept")])  # written while the database could be
    assert saved.id == "kept"
    cut_off = make_store(out_of_reach(migrated_url))
    try:
        # Writes, straight on the DBAPI connection (the hot path) and through SQLAlchemy.
        with pytest.raises(StoreUnavailable) as raised:
            cut_off.save_assessments([record("lost")])
        assert raised.value.kind == "OperationalError"
        with pytest.raises(StoreUnavailable):
            cut_off.create_token(scopes=["read"], label="orchard")
        with pytest.raises(StoreUnavailable):
            cut_off.readiness()
        if migrated_url.startswith("postgresql"):  # nothing of it answers
            with pytest.raises(StoreUnavailable):
                cut_off.get_assessment(assessment_id="kept")
            with pytest.raises(StoreUnavailable):
                cut_off.latest_policy_document(name="default")
        else:  # a read-only file is still read
            assert cut_off.get_assessment(assessment_id="kept").summary.id == "kept"
    finally:
        cut_off.close()
    assert store.get_assessment(assessment_id="lost") is None
    assert [row.id for row in store.list_assessments()] == ["kept"]


def chattr(flag: str, *paths: Path) -> None:
    subprocess.run(["chattr", flag, *map(str, paths)], check=True, capture_output=True)


def test_an_immutable_sqlite_file_is_unavailable_until_it_is_writable_again(tmp_path):
    db = tmp_path / "orchard.db"
    store = make_store(f"sqlite:///{db}")
    store.migrate()
    store.save_assessments([record("before")])
    files = [p for p in (db, Path(f"{db}-wal")) if p.exists()]
    try:
        # Tests run as root, whom file modes do not stop: the immutable attribute does.
        chattr("-i", *files)
    except (OSError, subprocess.CalledProcessError) as exc:
        store.close()
        pytest.skip(f"this file system has no immutable attribute: {exc}")
    try:
        chattr("+i", *files)
        store.close()  # connections opened from now on open read-only
        for _ in range(2):  # every try, not just the first
            with pytest.raises(StoreUnavailable):
                store.save_assessments([record("during")])
        chattr("-i", *files)
        # The same store takes writes again: the connections opened read-only were dropped.
        (saved,) = store.save_assessments([record("after")])
        assert saved.id == "after"
        chattr("+i", *files)
        with pytest.raises(StoreUnavailable):
            store.readiness()
        chattr("-i", *files)
        assert store.readiness().migrated
        assert sorted(row.id for row in store.list_assessments()) == ["after", "before"]
    finally:
        chattr("-i", *files)
        store.close()


def test_a_taken_idempotency_key_is_a_conflict(store):
    (first,) = store.save_assessments([record("first", key="harvest-1")])
    assert first.id == "first"
    (again,) = store.save_assessments([record("second", key="harvest-1")])
    assert isinstance(again, IdempotencyConflict) and isinstance(again, StoreConflict)
    assert again.key == "harvest-1"
    # In a batch the others are still written, each with its own outcome.
    saved = store.save_assessments(
        [record("b1"), record("b2", key="harvest-1"), record("b3", key="harvest-3")]
    )
    assert isinstance(saved[1], StoreConflict)
    assert [saved[0].id, saved[2].id] == ["b1", "b3"]
    assert store.get_assessment(assessment_id="second") is None
    assert store.get_assessment(assessment_id="b2") is None
    assert store.find_idempotency_key(key="harvest-1").body_hash == "digest-first"


def test_a_failure_that_is_no_outage_is_a_store_error(database_url):
    # Not migrated: the tables are missing. That is a fault to fix, not a reason to retry.
    store = make_store(database_url)
    try:
        with pytest.raises(StoreError) as raised:
            store.list_assessments()
        assert not isinstance(raised.value, StoreUnavailable)
        with pytest.raises(StoreError) as raised:
            store.save_assessments([record("nowhere")])
        assert not isinstance(raised.value, StoreUnavailable)
        ready = store.readiness()  # the database answers; its schema is not there yet
        assert ready.schema_revision is None and not ready.migrated
    finally:
        store.close()


def test_errors_that_are_not_the_databases_pass_through(store):
    def broken() -> str:
        raise KeyError("no key maker")

    with pytest.raises(KeyError):
        store.get_or_create_secret(name="report_links", make=broken)
    assert store.get_or_create_secret(name="report_links", make=lambda: "k" * 43) == "k" * 43
