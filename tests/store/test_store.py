"""Storage: migrations, the engine's settings, and the repository's transactions."""

from __future__ import annotations

import numpy as np
import orjson
import pytest
from sqlalchemy import inspect, select, text

from service.store import make_engine
from service.store import repository as repo
from service.store.migrate import current_revision, head_revision, upgrade

TABLES = {
    "assessments",
    "series_results",
    "series_inputs",
    "policies",
    "tokens",
    "idempotency_keys",
}


def test_upgrade_creates_every_table_and_is_repeatable(database_url):
    upgrade(database_url)
    upgrade(database_url)  # already at head: nothing to do
    engine = make_engine(database_url)
    try:
        assert TABLES <= set(inspect(engine).get_table_names())
        assert current_revision(engine) == head_revision()
    finally:
        engine.dispose()


def test_sqlite_engine_uses_wal_busy_timeout_and_foreign_keys(tmp_path):
    engine = make_engine(f"sqlite:///{tmp_path / 'x.db'}")
    try:
        with engine.connect() as conn:
            assert conn.execute(text("PRAGMA journal_mode")).scalar() == "wal"
            assert conn.execute(text("PRAGMA busy_timeout")).scalar() >= 1000
            assert conn.execute(text("PRAGMA foreign_keys")).scalar() == 1
    finally:
        engine.dispose()


def test_plain_postgresql_url_gets_psycopg3():
    engine = make_engine("postgresql://u@127.0.0.1:1/db")
    assert engine.dialect.driver == "psycopg"
    engine.dispose()


@pytest.mark.slow  # waits out the connect timeout
def test_postgresql_connections_give_up_on_a_silent_server(monkeypatch):
    # A server that accepts the TCP connection and never answers (as one behind a network
    # that drops its replies would): the attempt ends after the connect timeout instead of
    # holding the worker for the operating system's TCP timeout.
    import socket
    import threading

    from sqlalchemy.exc import OperationalError

    from service.store import engine as engine_module

    monkeypatch.setattr(engine_module, "POSTGRES_CONNECT_TIMEOUT_SECONDS", 1)
    silent = socket.socket()
    silent.bind(("127.0.0.1", 0))
    silent.listen(4)
    port = silent.getsockname()[1]
    engine = make_engine(f"postgresql://u@127.0.0.1:{port}/db")
    outcome: list[BaseException] = []

    def connect() -> None:
        try:
            engine.connect().close()
        except BaseException as exc:
            outcome.append(exc)

    worker = threading.Thread(target=connect, daemon=True)
    worker.start()
    worker.join(60)  # a guard against a hang, not a speed check
    silent.close()
    engine.dispose()
    assert not worker.is_alive(), "the connection attempt did not give up"
    assert len(outcome) == 1 and isinstance(outcome[0], OperationalError)
    assert "timeout" in str(outcome[0]).lower()


def test_a_connect_timeout_in_the_url_wins():
    engine = make_engine("postgresql://u@127.0.0.1:1/db?connect_timeout=17")
    _, params = engine.dialect.create_connect_args(engine.url)
    assert str(params.get("connect_timeout")) == "17"
    engine.dispose()


def test_unsupported_url_is_refused():
    with pytest.raises(ValueError, match="unsupported"):
        make_engine("mysql://u@127.0.0.1/db")


def _save(engine, aid="a1", key=None, digest=None, n=3, verdicts=None):
    verdicts = verdicts or ["pass"] * n
    series = [
        repo.SeriesResult(
            series_id=f"s{i}",
            verdict=verdicts[i],
            n_obs=10,
            json=f'{{"id":"s{i}","verdict":"{verdicts[i]}","n_obs":10}}'.encode(),
        )
        for i in range(n)
    ]
    inputs = [
        repo.SeriesInput(
            series_id=f"s{i}",
            weight=None,
            actuals=np.array([1.0, np.nan, 3.0 + i]),
            fitted=np.array([np.nan, 1.5, 2.5]),
            timestamps=["2026-01-01", "2026-01-02", "2026-01-03"],
            holdout_actuals=np.array([4.0]) if i == 0 else None,
            holdout_forecasts=np.array([3.5]) if i == 0 else None,
        )
        for i in range(n)
    ]
    (saved,) = repo.save_assessments(
        engine,
        [
            repo.NewAssessment(
                assessment_id=aid,
                created_at=repo.utcnow(),
                model="m",
                version="1",
                verdict="pass",
                n_failed=0,
                n_warned=0,
                policy_name="default",
                policy_version=1,
                policy_document={"name": "default"},
                head=b'{"id":"' + aid.encode() + b'","verdict":"pass"}',
                series=series,
                inputs=inputs,
                idempotency_key=key,
                body_hash=digest,
            )
        ],
    )
    if isinstance(saved, Exception):
        raise saved
    return saved


def test_save_and_read_back(engine):
    _save(engine)
    stored = repo.get_assessment(engine, assessment_id="a1")
    assert stored is not None
    import orjson

    doc = orjson.loads(stored.to_json())
    assert doc["id"] == "a1" and [s["id"] for s in doc["series"]] == ["s0", "s1", "s2"]
    inputs = repo.series_inputs(engine, assessment_id="a1")
    assert inputs is not None and len(inputs) == 3
    np.testing.assert_array_equal(inputs[2].actuals, [1.0, np.nan, 5.0])
    np.testing.assert_array_equal(inputs[0].fitted, [np.nan, 1.5, 2.5])
    assert inputs[0].timestamps == ["2026-01-01", "2026-01-02", "2026-01-03"]
    np.testing.assert_array_equal(inputs[0].holdout_actuals, [4.0])
    assert inputs[1].holdout_actuals is None
    assert repo.get_assessment(engine, assessment_id="nope") is None
    assert repo.series_inputs(engine, assessment_id="nope") is None


def test_flagged_rows_are_picked_by_the_database_in_input_order(engine):
    _save(engine, aid="f1", n=5, verdicts=["warn", "pass", "fail", "pass", "warn"])
    flagged = repo.get_assessment(engine, assessment_id="f1", flagged_only=True)
    assert flagged is not None
    assert flagged.verdicts == ["warn", "fail", "warn"]
    assert [orjson.loads(r)["id"] for r in flagged.series] == ["s0", "s2", "s4"]
    whole = repo.get_assessment(engine, assessment_id="f1")
    assert whole is not None and whole.head == flagged.head and len(whole.series) == 5
    assert repo.get_assessment(engine, assessment_id="nope", flagged_only=True) is None


def test_assessment_and_rows_are_one_transaction(engine):
    _save(engine, aid="a1", key="k", digest="h1")
    # The second save fails on its last statement (the key is taken): nothing of it may remain.
    with pytest.raises(repo.IdempotencyConflict):
        _save(engine, aid="a2", key="k", digest="h2", n=5)
    assert repo.get_assessment(engine, assessment_id="a2") is None
    with engine.connect() as conn:
        assert conn.execute(text("SELECT count(*) FROM series_results")).scalar() == 3
        assert conn.execute(text("SELECT count(*) FROM series_inputs")).scalar() == 3
        assert conn.execute(text("SELECT count(*) FROM assessments")).scalar() == 1


def test_foreign_keys_are_enforced(engine):
    from sqlalchemy import insert
    from sqlalchemy.exc import IntegrityError

    with pytest.raises(IntegrityError), engine.begin() as conn:
        conn.execute(
            insert(repo.SR),
            {
                "assessment_seq": 999,
                "position": 0,
                "series_id": "x",
                "verdict": "pass",
                "n_obs": 1,
                "result": "{}",
            },
        )


def test_list_newest_first_and_cursor(engine):
    for i in range(4):
        _save(engine, aid=f"a{i}", n=1)
    rows = repo.list_assessments(engine, limit=2)
    assert [r.id for r in rows] == ["a3", "a2"]
    rest = repo.list_assessments(engine, limit=5, before_seq=rows[-1].seq)
    assert [r.id for r in rest] == ["a1", "a0"]
    assert repo.latest_assessment(engine, model="m").id == "a3"
    assert repo.latest_assessment(engine, model="other") is None


def test_policy_versions_count_up(engine):
    one = repo.save_policy(engine, name="p", document={"checks": {}})
    two = repo.save_policy(engine, name="p", document={"checks": {"bias": {}}})
    assert (one.version, two.version) == (1, 2)
    assert repo.get_policy(engine, name="p").version == 2
    assert repo.get_policy(engine, name="p", version=1).document["version"] == 1
    assert repo.get_policy(engine, name="q") is None
    assert [p.version for p in repo.list_policies(engine)] == [2]


def test_tokens_hash_lookup_and_revoke(engine):
    record, secret = repo.create_token(engine, scopes=["read"], label="dash")
    assert repo.find_token(engine, secret=secret).id == record.id
    assert repo.find_token(engine, secret=secret + "x") is None
    with engine.connect() as conn:
        stored = conn.execute(select(repo.T.c.token_hash)).scalar()
    assert stored == repo.hash_token(secret) and secret not in stored
    assert repo.revoke_token(engine, token_id=record.id)
    assert repo.find_token(engine, secret=secret) is None
    assert not repo.revoke_token(engine, token_id=record.id)
    assert repo.count_tokens(engine) == 1


def test_pack_round_trip_keeps_nan():
    values = np.array([1.5, np.nan, -2.0])
    np.testing.assert_array_equal(repo.unpack(repo.pack(values)), values)
    assert repo.pack(None) is None and repo.unpack(None) is None


def _record(aid, key=None, digest=None):
    series = [
        repo.SeriesResult(
            series_id="s0", verdict="pass", n_obs=2, json=b'{"id":"s0","verdict":"pass","n_obs":2}'
        )
    ]
    inputs = [
        repo.SeriesInput(
            series_id="s0",
            weight=None,
            actuals=np.array([1.0, 2.0]),
            fitted=np.array([np.nan, 1.5]),
        )
    ]
    return repo.NewAssessment(
        assessment_id=aid,
        created_at=repo.utcnow(),
        model="m",
        version="1",
        verdict="pass",
        n_failed=0,
        n_warned=0,
        policy_name="default",
        policy_version=1,
        policy_document={"name": "default"},
        head=b'{"id":"' + aid.encode() + b'"}',
        series=series,
        inputs=inputs,
        idempotency_key=key,
        body_hash=digest,
    )


def test_many_in_one_transaction_and_a_taken_key_keeps_the_others(engine):
    _save(engine, aid="first", key="k1", digest="d1")
    saved = repo.save_assessments(
        engine,
        [_record("b1"), _record("b2", key="k1", digest="d2"), _record("b3", key="k3", digest="d3")],
    )
    assert isinstance(saved[1], repo.IdempotencyConflict)
    assert [s.id for s in (saved[0], saved[2])] == ["b1", "b3"]
    listed = {row.id for row in repo.list_assessments(engine, limit=10)}
    assert listed == {"first", "b1", "b3"}


def test_a_write_failing_after_a_conflict_is_reported_for_that_record_only(engine, monkeypatch):
    # After a key conflict each record is written alone; when the database then fails on one,
    # that record's outcome is the error and the ones written before it are reported written.
    _save(engine, aid="first", key="k1", digest="d1")
    real = repo._write_all
    calls = []

    def flaky(eng, records):
        calls.append([r.assessment_id for r in records])
        if [r.assessment_id for r in records] == ["c3"]:
            raise RuntimeError("database went away")
        return real(eng, records)

    monkeypatch.setattr(repo, "_write_all", flaky)
    saved = repo.save_assessments(
        engine, [_record("c1"), _record("c2", key="k1", digest="x"), _record("c3")]
    )
    assert calls[0] == ["c1", "c2", "c3"] and calls[1:] == [["c1"], ["c2"], ["c3"]]
    assert saved[0].id == "c1"
    assert isinstance(saved[1], repo.IdempotencyConflict)
    assert isinstance(saved[2], RuntimeError)
    listed = {row.id for row in repo.list_assessments(engine, limit=10)}
    assert listed == {"first", "c1"}
