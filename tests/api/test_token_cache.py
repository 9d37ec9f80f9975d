"""A worker remembers a verified stored token briefly (PLUMBLINE_TOKEN_CACHE_SECONDS)."""

from __future__ import annotations

from service.api.auth import Principal, TokenCache
from service.store import repository as repo

from .helpers import ADMIN


class Clock:
    def __init__(self) -> None:
        self.now = 1000.0

    def __call__(self) -> float:
        return self.now


def mint(client, *scopes: str) -> tuple[str, dict[str, str]]:
    doc = client.post("/v1/tokens", json={"scopes": list(scopes)}, headers=ADMIN).json()
    return doc["id"], {"Authorization": f"Bearer {doc['token']}"}


def counting_lookups(monkeypatch) -> list[str]:
    calls: list[str] = []
    real = repo.find_token

    def find_token(engine, *, secret):
        calls.append(secret)
        return real(engine, secret=secret)

    monkeypatch.setattr(repo, "find_token", find_token)
    return calls


def test_a_verified_token_is_looked_up_once_within_the_time(make_client, monkeypatch):
    client = make_client()
    clock = Clock()
    client.app.state.services.token_cache = TokenCache(2.0, clock=clock)
    _, reader = mint(client, "read")
    calls = counting_lookups(monkeypatch)
    for _ in range(5):
        assert client.get("/v1/assessments", headers=reader).status_code == 200
    assert len(calls) == 1
    clock.now += 2.0  # the time is up: looked up again
    assert client.get("/v1/assessments", headers=reader).status_code == 200
    assert len(calls) == 2


def test_revoking_through_the_api_takes_effect_at_once(make_client):
    client = make_client()
    token_id, reader = mint(client, "read")
    assert client.get("/v1/assessments", headers=reader).status_code == 200  # now remembered
    assert client.delete(f"/v1/tokens/{token_id}", headers=ADMIN).status_code == 204
    r = client.get("/v1/assessments", headers=reader)
    assert r.status_code == 401
    assert r.headers["content-type"] == "application/problem+json"


def test_a_revocation_elsewhere_takes_effect_within_the_time(make_client):
    # Revoked on the database directly (another worker, the CLI): this worker learns it when
    # its remembered verification runs out.
    client = make_client()
    clock = Clock()
    client.app.state.services.token_cache = TokenCache(2.0, clock=clock)
    token_id, reader = mint(client, "read")
    assert client.get("/v1/assessments", headers=reader).status_code == 200
    assert repo.revoke_token(client.app.state.store.engine, token_id=token_id)
    clock.now += 1.9
    assert client.get("/v1/assessments", headers=reader).status_code == 200
    clock.now += 0.1
    assert client.get("/v1/assessments", headers=reader).status_code == 401


def test_zero_looks_up_every_request(make_client, monkeypatch):
    client = make_client(token_cache_seconds=0)
    token_id, reader = mint(client, "read")
    calls = counting_lookups(monkeypatch)
    for _ in range(3):
        assert client.get("/v1/assessments", headers=reader).status_code == 200
    assert len(calls) == 3
    assert repo.revoke_token(client.app.state.store.engine, token_id=token_id)
    assert client.get("/v1/assessments", headers=reader).status_code == 401


def test_scopes_stay_enforced_for_a_remembered_token(make_client):
    client = make_client()
    _, reader = mint(client, "read")
    assert client.get("/v1/assessments", headers=reader).status_code == 200
    for _ in range(2):  # remembered now: still no submitting or minting
        assert client.post("/v1/assessments", json={}, headers=reader).status_code == 403
        assert (
            client.post("/v1/tokens", json={"scopes": ["read"]}, headers=reader).status_code == 403
        )


def test_a_lookup_that_began_before_a_revocation_does_not_put_the_token_back():
    clock = Clock()
    cache = TokenCache(2.0, clock=clock)
    who = Principal(token_id="t1", scopes=frozenset({"read"}))
    cache.forget("t1")  # revoked here, while a lookup of t1 was under way
    cache.put("secret-1", who)  # that lookup ends: not remembered
    assert cache.get("secret-1") is None
    clock.now += 2.0
    cache.put("secret-1", who)  # a later successful lookup is remembered again
    assert cache.get("secret-1") == who


def test_failed_lookups_are_not_remembered(make_client, monkeypatch):
    client = make_client()
    calls = counting_lookups(monkeypatch)
    bad = {"Authorization": "Bearer plb_not-a-token"}
    for _ in range(2):
        assert client.get("/v1/assessments", headers=bad).status_code == 401
    assert len(calls) == 2
