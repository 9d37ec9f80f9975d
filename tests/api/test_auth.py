"""Bearer tokens and scopes: who may do what."""

from __future__ import annotations

import hashlib

from sqlalchemy import select

from service.store import make_engine, make_store
from service.store.models import TokenRow

from .helpers import ADMIN


def test_missing_token_is_401_with_challenge(client):
    r = client.get("/v1/assessments")
    assert r.status_code == 401
    assert r.headers["content-type"] == "application/problem+json"
    assert r.headers["www-authenticate"].startswith("Bearer")


def test_unknown_token_is_401(client):
    r = client.get("/v1/assessments", headers={"Authorization": "Bearer plb_nope"})
    assert r.status_code == 401


def test_other_scheme_is_401(client):
    r = client.get("/v1/assessments", headers={"Authorization": "Basic dXNlcjpwYXNz"})
    assert r.status_code == 401


def test_every_v1_endpoint_needs_a_token(client):
    for method, path in [
        ("POST", "/v1/assessments"),
        ("GET", "/v1/assessments"),
        ("GET", "/v1/assessments/x"),
        ("GET", "/v1/assessments/x/series"),
        ("GET", "/v1/models/m/verdict"),
        ("GET", "/v1/checks"),
        ("POST", "/v1/policies"),
        ("GET", "/v1/policies"),
        ("GET", "/v1/policies/default"),
        ("POST", "/v1/tokens"),
        ("GET", "/v1/tokens"),
        ("DELETE", "/v1/tokens/x"),
    ]:
        assert client.request(method, path).status_code == 401, (method, path)


def test_read_token_reads_but_cannot_submit_or_mint(client, token, body):
    read = token("read")
    assert client.get("/v1/assessments", headers=read).status_code == 200
    assert client.get("/v1/checks", headers=read).status_code == 200
    r = client.post("/v1/assessments", json=body(n=1), headers=read)
    assert r.status_code == 403
    assert r.headers["content-type"] == "application/problem+json"
    assert "submit" in r.json()["detail"]
    assert client.post("/v1/tokens", json={"scopes": ["admin"]}, headers=read).status_code == 403
    assert client.post("/v1/policies", json={"name": "x"}, headers=read).status_code == 403


def test_submit_token_submits_but_cannot_read(client, token, body):
    submit = token("submit")
    r = client.post("/v1/assessments", json=body(n=1), headers=submit)
    assert r.status_code == 201
    assert client.get(r.headers["location"], headers=submit).status_code == 403


def test_minted_admin_token_holds_every_scope(client, token, body):
    admin = token("admin")
    r = client.post("/v1/assessments", json=body(n=1), headers=admin)
    assert r.status_code == 201
    assert client.get(r.headers["location"], headers=admin).status_code == 200
    assert client.get("/v1/tokens", headers=admin).status_code == 200


def test_revoked_token_is_refused(client):
    r = client.post("/v1/tokens", json={"scopes": ["read"]}, headers=ADMIN)
    secret, token_id = r.json()["token"], r.json()["id"]
    header = {"Authorization": f"Bearer {secret}"}
    assert client.get("/v1/checks", headers=header).status_code == 200
    assert client.delete(f"/v1/tokens/{token_id}", headers=ADMIN).status_code == 204
    assert client.get("/v1/checks", headers=header).status_code == 401


def test_tokens_are_stored_only_as_sha256_hashes(client, settings):
    r = client.post("/v1/tokens", json={"scopes": ["read"], "label": "dash"}, headers=ADMIN)
    secret = r.json()["token"]
    engine = make_engine(settings.database_url)
    try:
        with engine.connect() as conn:
            rows = conn.execute(select(TokenRow.__table__)).all()
    finally:
        engine.dispose()
    assert len(rows) == 1
    assert rows[0].token_hash == hashlib.sha256(secret.encode()).hexdigest()
    assert all(secret not in str(v) for v in rows[0])


def test_wrong_env_token_of_same_length_is_refused(client):
    wrong = "x" * len(ADMIN["Authorization"].removeprefix("Bearer "))
    assert client.get("/v1/checks", headers={"Authorization": f"Bearer {wrong}"}).status_code == 401


def test_no_admin_token_configured_means_only_stored_tokens(make_client):
    client = make_client(admin_token=None)
    assert client.get("/v1/checks", headers=ADMIN).status_code == 401


def test_first_start_mints_one_admin_token_once(migrated_url):
    from service.api.auth import ensure_first_token
    from service.settings import Settings

    settings = Settings(database_url=migrated_url, admin_token=None)
    store = make_store(migrated_url)
    try:
        secret = ensure_first_token(store, settings)
        assert secret is not None and secret.startswith("plb_")
        assert ensure_first_token(store, settings) is None
        with_env = Settings(database_url=migrated_url, admin_token="set")
        assert ensure_first_token(store, with_env) is None
    finally:
        store.close()


def test_env_admin_token_suppresses_first_token(migrated_url):
    from service.api.auth import ensure_first_token
    from service.settings import Settings

    store = make_store(migrated_url)
    try:
        assert (
            ensure_first_token(store, Settings(database_url=migrated_url, admin_token="t")) is None
        )
    finally:
        store.close()


def test_an_app_on_a_fresh_database_without_tokens_prints_one(database_url, capsys):
    from service.api.app import create_app
    from service.settings import Settings

    create_app(Settings(database_url=database_url, admin_token=None)).state.store.close()
    printed = capsys.readouterr().out
    assert "plb_" in printed
    create_app(Settings(database_url=database_url, admin_token=None)).state.store.close()
    assert "plb_" not in capsys.readouterr().out
