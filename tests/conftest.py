"""Test-suite wide settings and shared fixtures.

Databases: a clean database per test on SQLite and on PostgreSQL. PostgreSQL comes from
``PLUMBLINE_TEST_POSTGRES_URL`` (default: the local server on 127.0.0.1:5432, database ``test``).
With ``PLUMBLINE_REQUIRE_POSTGRES=1`` (as CI sets) an unreachable server fails the PostgreSQL
tests instead of skipping them. Each PostgreSQL test gets a schema of its own (created, migrated,
dropped afterwards).
"""

from __future__ import annotations

import os
import uuid
from collections.abc import Iterator

import pytest
from hypothesis import HealthCheck, settings

from tests.postgres import postgres_url, require_postgres

# Benchmarks under tests/perf are run by hand (python tests/perf/bench_core.py), never by pytest.
collect_ignore = ["perf"]

# Property tests: a quick profile by default; PLUMBLINE_HYPOTHESIS=thorough searches longer.
settings.register_profile(
    "default", max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow]
)
settings.register_profile(
    "thorough", max_examples=2000, deadline=None, suppress_health_check=[HealthCheck.too_slow]
)
settings.load_profile(os.environ.get("PLUMBLINE_HYPOTHESIS", "default"))

BACKENDS = ("sqlite", "postgresql")


def _schema_url(base: str, schema: str) -> str:
    from sqlalchemy.engine import make_url

    url = make_url(base).update_query_dict({"options": f"-csearch_path={schema}"})
    return url.render_as_string(hide_password=False)


@pytest.fixture(params=BACKENDS)
def database_url(request: pytest.FixtureRequest, tmp_path) -> Iterator[str]:
    """An empty database (not yet migrated) on each backend."""
    if request.param == "sqlite":
        yield f"sqlite:///{tmp_path / 'plumbline-test.db'}"
        return
    require_postgres()
    from sqlalchemy import create_engine, text

    schema = "t_" + uuid.uuid4().hex[:16]
    admin = create_engine(postgres_url())
    try:
        with admin.begin() as conn:
            conn.execute(text(f'CREATE SCHEMA "{schema}"'))
        yield _schema_url(postgres_url(), schema)
    finally:
        with admin.begin() as conn:
            conn.execute(text(f'DROP SCHEMA IF EXISTS "{schema}" CASCADE'))
        admin.dispose()


@pytest.fixture
def migrated_url(database_url: str) -> str:
    """A database at the newest schema revision."""
    from service.store.migrate import upgrade

    upgrade(database_url)
    return database_url


@pytest.fixture
def engine(migrated_url: str):
    from service.store import make_engine

    eng = make_engine(migrated_url)
    yield eng
    eng.dispose()
