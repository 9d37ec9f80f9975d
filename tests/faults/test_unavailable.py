"""The database unavailable: the SQLite file made read-only, PostgreSQL cut off (as if stopped)
or refusing connections to the service's database. Meanwhile ``/readyz`` says so and
submissions answer 503 problem+json with ``Retry-After``; once the database is back the same
submission (same ``Idempotency-Key``) is stored once, and nothing stored before is lost."""

from __future__ import annotations

import subprocess
import time
from collections.abc import Callable
from pathlib import Path

import pytest
from fastapi.testclient import TestClient
from sqlalchemy import create_engine, text
from sqlalchemy.engine import make_url

from service.api.app import create_app
from service.settings import Settings
from tests.postgres import postgres_url

from .conftest import ADMIN, ADMIN_TOKEN, series_body
from .relay import Relay

PASSWORD = "relay-pw-7c1d"


def assert_unavailable(r) -> None:
    assert r.status_code == 503, r.text
    assert r.headers["content-type"].startswith("application/problem+json")
    assert int(r.headers["retry-after"]) >= 1
    doc = r.json()
    assert doc["status"] == 503 and doc["detail"]
    assert PASSWORD not in r.text


def wait_ready(client: TestClient, timeout: float = 15.0) -> None:
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        if client.get("/readyz").status_code == 200:
            return
        time.sleep(0.2)
    raise AssertionError(f"not ready again: {client.get('/readyz').text}")


def outage_and_return(
    client: TestClient, break_it: Callable[[], None], mend_it: Callable[[], None]
) -> None:
    before = client.post(
        "/v1/assessments", json=series_body("quay-before", 3, seed=1), headers=ADMIN
    )
    assert before.status_code == 201, before.text
    key = {"Idempotency-Key": "quay-during-0001"}
    during = series_body("quay-during", 4, seed=2)
    break_it()
    try:
        ready = client.get("/readyz")
        assert_unavailable(ready)
        for _ in range(3):  # every try, not just the first, while it lasts
            assert_unavailable(
                client.post("/v1/assessments", json=during, headers={**ADMIN, **key})
            )
        read = client.get(f"/v1/assessments/{before.json()['id']}", headers=ADMIN)
        assert read.status_code in (200, 503), read.text
    finally:
        mend_it()
    wait_ready(client)
    stored = client.post("/v1/assessments", json=during, headers={**ADMIN, **key})
    assert stored.status_code == 201, stored.text
    again = client.post("/v1/assessments", json=during, headers={**ADMIN, **key})
    assert again.status_code == 200 and again.json()["id"] == stored.json()["id"]
    listed = client.get("/v1/assessments", headers=ADMIN).json()["items"]
    assert sorted(row["model"] for row in listed) == ["quay-before", "quay-during"]
    full = client.get(f"/v1/assessments/{before.json()['id']}", headers=ADMIN).json()
    assert len(full["series"]) == 3


def chattr(flag: str, *paths: Path) -> None:
    subprocess.run(["chattr", flag, *map(str, paths)], check=True, capture_output=True)


def test_sqlite_file_read_only(tmp_path):
    db = tmp_path / "quay.db"
    app = create_app(Settings(database_url=f"sqlite:///{db}", admin_token=ADMIN_TOKEN))
    with TestClient(app, raise_server_exceptions=False) as client:
        files = [p for p in (db, Path(f"{db}-wal")) if p.exists()]
        # Tests run as root, whom file modes do not stop: the immutable attribute does.
        try:
            chattr("-i", *files)
        except (OSError, subprocess.CalledProcessError) as exc:
            pytest.skip(f"this file system has no immutable attribute: {exc}")

        def break_it() -> None:
            chattr("+i", *files)
            # Connections opened from now on (a new worker, a recycled pool) open read-only,
            # and SQLite keeps them so: the service must drop them once it meets the outage.
            app.state.store.engine.dispose()

        def mend_it() -> None:
            chattr("-i", *files)

        try:
            outage_and_return(client, break_it, mend_it)
        finally:
            mend_it()


@pytest.fixture
def relayed(postgres_database):
    """The test's database reached through a relay that can cut it off."""
    url = make_url(postgres_database)
    relay = Relay((url.host or "127.0.0.1", url.port or 5432))
    relay.restore()
    yield (
        relay,
        url.set(port=relay.port, password=PASSWORD).render_as_string(hide_password=False)
        + "?connect_timeout=3",
    )
    relay.cut()


@pytest.mark.slow  # dropping the database after the cut-off connection takes seconds
def test_postgresql_cut_off(relayed):
    relay, url = relayed
    app = create_app(Settings(database_url=url, admin_token=ADMIN_TOKEN))
    with TestClient(app, raise_server_exceptions=False) as client:
        outage_and_return(client, relay.cut, relay.restore)


def test_postgresql_refusing_the_database(postgres_database):
    name = make_url(postgres_database).database
    admin = create_engine(postgres_url(), isolation_level="AUTOCOMMIT")

    def break_it() -> None:
        with admin.connect() as conn:
            conn.execute(text(f'ALTER DATABASE "{name}" ALLOW_CONNECTIONS false'))
            conn.execute(
                text(
                    "SELECT pg_terminate_backend(pid) FROM pg_stat_activity WHERE datname = :name"
                ),
                {"name": name},
            )

    def mend_it() -> None:
        with admin.connect() as conn:
            conn.execute(text(f'ALTER DATABASE "{name}" ALLOW_CONNECTIONS true'))

    app = create_app(Settings(database_url=postgres_database, admin_token=ADMIN_TOKEN))
    try:
        with TestClient(app, raise_server_exceptions=False) as client:
            outage_and_return(client, break_it, mend_it)
    finally:
        mend_it()
        admin.dispose()
