"""The PostgreSQL server the storage and HTTP tests also run against.

``PLUMBLINE_TEST_POSTGRES_URL`` names it (default the local test database; ``none`` leaves
PostgreSQL out even when a local server answers); with ``PLUMBLINE_REQUIRE_POSTGRES=1`` (as CI
sets) an unreachable server fails a test instead of skipping it.
"""

from __future__ import annotations

import os

import pytest

DEFAULT_POSTGRES_URL = "postgresql+psycopg://postgres@127.0.0.1:5432/test"
_postgres_state: dict[str, str | None] = {}


def postgres_url() -> str:
    return os.environ.get("PLUMBLINE_TEST_POSTGRES_URL") or DEFAULT_POSTGRES_URL


def postgres_required() -> bool:
    return os.environ.get("PLUMBLINE_REQUIRE_POSTGRES", "") not in ("", "0", "false", "no")


def _postgres_problem() -> str | None:
    """``None`` when the PostgreSQL server answers, else why not (checked once per test run)."""
    if "problem" not in _postgres_state and postgres_url().strip().lower() == "none":
        _postgres_state["problem"] = "PLUMBLINE_TEST_POSTGRES_URL=none leaves PostgreSQL out"
    if "problem" not in _postgres_state:
        try:
            import psycopg
            from sqlalchemy.engine import make_url

            url = make_url(postgres_url())
            with psycopg.connect(
                host=url.host or "127.0.0.1",
                port=url.port or 5432,
                user=url.username,
                password=url.password,
                dbname=url.database,
                connect_timeout=5,
            ) as conn:
                conn.execute("SELECT 1")
            _postgres_state["problem"] = None
        except Exception as exc:
            _postgres_state["problem"] = f"{type(exc).__name__}: {exc}"
    return _postgres_state["problem"]


def require_postgres() -> None:
    """Return when PostgreSQL answers; else skip, or fail when it is required."""
    problem = _postgres_problem()
    if problem is None:
        return
    if postgres_required():
        pytest.fail(
            f"PostgreSQL is required (PLUMBLINE_REQUIRE_POSTGRES) but unreachable at "
            f"{postgres_url()}: {problem}"
        )
    pytest.skip(f"PostgreSQL unreachable at {postgres_url()}: {problem}")
