"""Fixtures for the hardening tests: the real app on a fresh SQLite file per test."""

from __future__ import annotations

from collections.abc import Callable, Iterator
from typing import Any

import pytest
from fastapi.testclient import TestClient

from service.api.app import create_app
from service.settings import Settings
from tests.postgres import postgres_url, require_postgres

ADMIN_TOKEN = "plb_hardening-admin-0a1b2c3d4e5f"
ADMIN = {"Authorization": f"Bearer {ADMIN_TOKEN}"}


def series(sid: str, n: int = 60, seed: int = 0) -> dict[str, Any]:
    """An invented series whose fitted values miss the actuals by small, varied amounts."""
    import numpy as np

    rng = np.random.default_rng(seed)
    fitted = 50.0 + 5.0 * np.sin(np.arange(n) / 4.0)
    actuals = fitted + rng.normal(0.0, 1.0, n)
    return {
        "id": sid,
        "actuals": [round(float(v), 3) for v in actuals],
        "fitted": [round(float(v), 3) for v in fitted],
    }


def assessment(
    model: str = "kiln-output", n_series: int = 1, n: int = 60, seed: int = 0
) -> dict[str, Any]:
    return {
        "model": model,
        "version": "1",
        "series": [series(f"kiln-{i}", n=n, seed=seed + i) for i in range(n_series)],
    }


@pytest.fixture
def make_client(tmp_path) -> Iterator[Callable[..., TestClient]]:
    """Build a client for the app on a fresh SQLite file, settings overridden by keyword."""
    made: list[TestClient] = []

    def build(**overrides: Any) -> TestClient:
        values: dict[str, Any] = {
            "database_url": f"sqlite:///{tmp_path / f'hardening-{len(made)}.db'}",
            "admin_token": ADMIN_TOKEN,
            **overrides,
        }
        client = TestClient(create_app(Settings(**values)), raise_server_exceptions=False)
        client.__enter__()
        made.append(client)
        return client

    yield build
    for client in made:
        client.__exit__(None, None, None)


def mint(client: TestClient, *scopes: str) -> str:
    """A new token with ``scopes`` (the secret)."""
    r = client.post(
        "/v1/tokens", json={"scopes": list(scopes), "label": "hardening"}, headers=ADMIN
    )
    assert r.status_code == 201, r.text
    return r.json()["token"]


@pytest.fixture(scope="module")
def postgres_schema_url() -> Iterator[str]:
    """A URL for a fresh schema of its own on the PostgreSQL server (dropped afterwards)."""
    import uuid

    from sqlalchemy import create_engine, text
    from sqlalchemy.engine import make_url

    require_postgres()
    schema = "hardening_" + uuid.uuid4().hex[:12]
    admin = create_engine(postgres_url())
    with admin.begin() as conn:
        conn.execute(text(f'CREATE SCHEMA "{schema}"'))
    url = make_url(postgres_url()).update_query_dict({"options": f"-csearch_path={schema}"})
    try:
        yield url.render_as_string(hide_password=False)
    finally:
        with admin.begin() as conn:
            conn.execute(text(f'DROP SCHEMA IF EXISTS "{schema}" CASCADE'))
        admin.dispose()
