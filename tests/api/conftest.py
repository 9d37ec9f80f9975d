"""Fixtures for the HTTP tests: an app on a clean database, a client, tokens, bodies."""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

import pytest
from fastapi.testclient import TestClient

from service.api.app import create_app
from service.settings import Settings

from .helpers import ADMIN, ADMIN_TOKEN, white_noise_series


@pytest.fixture
def settings(database_url: str) -> Settings:
    return Settings(database_url=database_url, admin_token=ADMIN_TOKEN)


@pytest.fixture
def make_client(database_url: str) -> Callable[..., TestClient]:
    """Build a client for an app with settings overridden by keyword."""
    made: list[TestClient] = []

    def build(**overrides: Any) -> TestClient:
        values = {"database_url": database_url, "admin_token": ADMIN_TOKEN, **overrides}
        client = TestClient(create_app(Settings(**values)), raise_server_exceptions=False)
        client.__enter__()
        made.append(client)
        return client

    yield build
    for client in made:
        client.__exit__(None, None, None)


@pytest.fixture
def client(make_client: Callable[..., TestClient]) -> TestClient:
    return make_client()


@pytest.fixture
def token(client: TestClient) -> Callable[..., dict[str, str]]:
    """Mint a token with the given scopes; returns its Authorization header."""

    def mint(*scopes: str) -> dict[str, str]:
        r = client.post("/v1/tokens", json={"scopes": list(scopes), "label": "test"}, headers=ADMIN)
        assert r.status_code == 201, r.text
        return {"Authorization": f"Bearer {r.json()['token']}"}

    return mint


@pytest.fixture
def body() -> Callable[..., dict[str, Any]]:
    """An assessment body with ``n`` white-noise series (keywords go to the series maker)."""

    def make(
        n: int = 3, model: str = "loaves-daily", version: str = "1", **kw: Any
    ) -> dict[str, Any]:
        return {
            "model": model,
            "version": version,
            "labels": {"run": "7"},
            "series": [white_noise_series(f"s{i}", seed=i, **kw) for i in range(n)],
        }

    return make
