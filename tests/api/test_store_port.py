"""The API talks to the storage port only: routers are given the store and the settings as
dependencies, and the store's exceptions become problem+json in one place.

The structural checks read the source of ``service/api``; the behavioural ones swap the store
dependency for one that fails, and look at what every kind of request answers.
"""

from __future__ import annotations

import ast
from collections.abc import Callable
from pathlib import Path
from typing import Any

import pytest

from service.api.deps import get_settings, get_store
from service.store.port import Store, StoreConflict, StoreError, StoreUnavailable

from .helpers import ADMIN, white_noise_series

API = Path(__file__).resolve().parents[2] / "service" / "api"
DATABASE_MODULES = ("sqlalchemy", "sqlite3", "psycopg", "psycopg2", "alembic")
PROBLEM_JSON = "application/problem+json"


def imported_modules(tree: ast.AST) -> set[str]:
    found: set[str] = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            found.update(alias.name for alias in node.names)
        elif isinstance(node, ast.ImportFrom) and node.level == 0 and node.module:
            found.add(node.module)
    return found


def api_modules() -> list[Path]:
    paths = sorted(API.rglob("*.py"))
    assert len(paths) > 10 and API / "routers" / "assessments.py" in paths
    return paths


def test_no_api_module_imports_a_database_library():
    offenders = {
        str(path.relative_to(API)): sorted(
            m
            for m in imported_modules(ast.parse(path.read_text()))
            if m.split(".")[0] in DATABASE_MODULES
        )
        for path in api_modules()
    }
    assert {k: v for k, v in offenders.items() if v} == {}
    # Nor reaches past the port into the SQL store's own modules.
    inner = ("service.store.repository", "service.store.engine", "service.store.sql")
    reaching = {
        str(path.relative_to(API)): sorted(
            m for m in imported_modules(ast.parse(path.read_text())) if m.startswith(inner)
        )
        for path in api_modules()
    }
    assert {k: v for k, v in reaching.items() if v} == {}


def reads_of_app_state(tree: ast.AST) -> list[int]:
    """Lines that touch ``<something>.app.state`` or ``app.state``."""
    lines = []
    for node in ast.walk(tree):
        if isinstance(node, ast.Attribute) and node.attr == "state":
            owner = node.value
            if (isinstance(owner, ast.Attribute) and owner.attr == "app") or (
                isinstance(owner, ast.Name) and owner.id == "app"
            ):
                lines.append(node.lineno)
    return lines


def test_routers_read_nothing_from_the_app_state():
    routers = sorted((API / "routers").glob("*.py"))
    assert len(routers) >= 7
    found = {p.name: reads_of_app_state(ast.parse(p.read_text())) for p in routers}
    assert {k: v for k, v in found.items() if v} == {}
    # The check finds such a read where there is one.
    assert reads_of_app_state(ast.parse("x = request.app.state.store")) == [1]
    # Outside the routers only the module that hands out the dependencies reads the store and
    # the settings from the app.
    others = {
        str(p.relative_to(API)): reads_of_app_state(ast.parse(p.read_text()))
        for p in api_modules()
        if p.parent == API and p.name not in ("deps.py", "security.py")
    }
    assert {k: v for k, v in others.items() if v} == {}


def failing_store(error: Callable[[], Exception]) -> Store:
    """A store whose every operation raises ``error()``."""

    def operation(_self: Any, *_args: Any, **_kwargs: Any) -> Any:
        raise error()

    methods = dict.fromkeys(Store.__abstractmethods__, operation)
    return type("FailingStore", (Store,), methods)()


def down() -> StoreUnavailable:
    return StoreUnavailable("OperationalError", kind="OperationalError")


@pytest.fixture
def swapped(client):
    """Swap the app's store for another one for the requests that follow."""

    def swap(store: Store) -> None:
        async def replacement() -> Store:
            return store

        client.app.dependency_overrides[get_store] = replacement

    yield swap
    client.app.dependency_overrides.clear()


def assert_unavailable(r) -> None:
    assert r.status_code == 503, r.text
    assert r.headers["content-type"] == PROBLEM_JSON
    assert int(r.headers["retry-after"]) >= 1
    doc = r.json()
    assert doc["status"] == 503 and "nothing was stored" in doc["detail"]
    assert doc["type"].endswith(":database-unavailable")


def test_an_unavailable_store_is_503_with_retry_after_on_every_route(client, swapped, token):
    reader = token("read")  # minted on the real store, before the swap
    stored = client.post("/v1/assessments", json={**small_body(), "model": "pier"}, headers=ADMIN)
    assert stored.status_code == 201, stored.text
    swapped(failing_store(down))
    assert_unavailable(client.post("/v1/assessments", json=small_body(), headers=ADMIN))
    assert_unavailable(
        client.post(
            "/v1/assessments",
            json=small_body(),
            headers={**ADMIN, "Idempotency-Key": "pier-0001"},
        )
    )
    for path in (
        "/v1/assessments",
        f"/v1/assessments/{stored.json()['id']}",
        f"/v1/assessments/{stored.json()['id']}/series",
        "/v1/models/pier/verdict",
        "/v1/policies",
        "/v1/policies/default",
        "/v1/tokens",
    ):
        assert_unavailable(client.get(path, headers=ADMIN))
    # A stored token is looked up in the store (never used yet, so not remembered).
    assert_unavailable(client.get("/v1/checks", headers=reader))
    ready = client.get("/readyz")
    assert ready.status_code == 503 and ready.headers["content-type"] == PROBLEM_JSON
    assert int(ready.headers["retry-after"]) >= 1
    assert ready.json()["detail"] == "database unreachable: OperationalError"
    # What needs no store still answers: the catalogue with the admin token, liveness, and an
    # unstored assessment with its policy inline.
    assert client.get("/v1/checks", headers=ADMIN).status_code == 200
    assert client.get("/healthz").status_code == 200
    inline = {**small_body(), "policy": {"name": "pier-rules", "checks": {}}}
    unstored = client.post("/v1/assessments?store=false", json=inline, headers=ADMIN)
    assert unstored.status_code == 200, unstored.text
    assert unstored.json()["policy"]["name"] == "pier-rules"
    client.app.dependency_overrides.clear()
    # Nothing reached the real store meanwhile.
    listed = client.get("/v1/assessments", headers=ADMIN).json()["items"]
    assert [row["model"] for row in listed] == ["pier"]


def small_body() -> dict[str, Any]:
    """An invented weekly series of pier visitors: white noise around a seasonal level."""
    return {
        "model": "pier-footfall",
        "version": "3",
        "series": [white_noise_series("pier-east", n=104, seed=31)],
    }


def test_a_conflict_in_the_store_is_409(client, swapped):
    swapped(failing_store(lambda: StoreConflict("policy 'x' version 2 is already stored")))
    r = client.post("/v1/policies", json={"name": "x", "checks": {}}, headers=ADMIN)
    assert r.status_code == 409, r.text
    assert r.headers["content-type"] == PROBLEM_JSON
    assert "already stored" in r.json()["detail"]


def test_any_other_store_failure_is_a_500_naming_no_internals(client, swapped):
    swapped(failing_store(lambda: StoreError("ProgrammingError", kind="ProgrammingError")))
    r = client.get("/v1/assessments", headers=ADMIN)
    assert r.status_code == 500
    assert r.headers["content-type"] == PROBLEM_JSON
    assert "ProgrammingError" not in r.text and "internal error" in r.json()["detail"]


def test_the_settings_come_from_their_dependency(client):
    async def strict() -> Any:
        return client.app.state.settings.model_copy(update={"page_limit_max": 3})

    client.app.dependency_overrides[get_settings] = strict
    try:
        r = client.get("/v1/assessments?limit=4", headers=ADMIN)
        assert r.status_code == 422 and r.json()["errors"][0]["loc"] == "query.limit"
        assert client.get("/v1/assessments?limit=3", headers=ADMIN).status_code == 200
    finally:
        client.app.dependency_overrides.clear()
    assert client.get("/v1/assessments?limit=4", headers=ADMIN).status_code == 200
