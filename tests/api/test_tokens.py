"""POST/GET/DELETE /v1/tokens."""

from __future__ import annotations

import pytest

from .helpers import ADMIN


def test_create_returns_secret_once_and_lists_without_it(client):
    r = client.post(
        "/v1/tokens", json={"scopes": ["read", "submit"], "label": "pipeline"}, headers=ADMIN
    )
    assert r.status_code == 201
    doc = r.json()
    assert set(doc) >= {"id", "token", "scopes", "label", "created_at"}
    assert doc["scopes"] == ["submit", "read"]
    listed = client.get("/v1/tokens", headers=ADMIN).json()["items"]
    assert [t["id"] for t in listed] == [doc["id"]]
    assert "token" not in listed[0] and doc["token"] not in str(listed)


def test_delete_unknown_is_404(client):
    r = client.delete("/v1/tokens/nope", headers=ADMIN)
    assert r.status_code == 404
    assert r.headers["content-type"] == "application/problem+json"


def test_delete_twice_is_404(client):
    tid = client.post("/v1/tokens", json={"scopes": ["read"]}, headers=ADMIN).json()["id"]
    assert client.delete(f"/v1/tokens/{tid}", headers=ADMIN).status_code == 204
    assert client.delete(f"/v1/tokens/{tid}", headers=ADMIN).status_code == 404
    listed = client.get("/v1/tokens", headers=ADMIN).json()["items"]
    assert listed[0]["revoked_at"] is not None


@pytest.mark.parametrize(
    ("doc", "loc"),
    [
        ({"scopes": []}, "scopes"),
        ({"scopes": ["root"]}, "scopes[0]"),
        ({"scopes": "read"}, "scopes"),
        ({}, "scopes"),
        ({"scopes": ["read"], "label": 5}, "label"),
        ({"scopes": ["read"], "colour": "red"}, "colour"),
    ],
)
def test_invalid_token_requests_are_422(client, doc, loc):
    r = client.post("/v1/tokens", json=doc, headers=ADMIN)
    assert r.status_code == 422
    assert loc in [e["loc"] for e in r.json()["errors"]]


def test_token_request_needs_json(client):
    r = client.post(
        "/v1/tokens",
        content=b"scopes=read",
        headers={**ADMIN, "Content-Type": "application/x-www-form-urlencoded"},
    )
    assert r.status_code == 415
    r = client.post(
        "/v1/tokens", content=b"{", headers={**ADMIN, "Content-Type": "application/json"}
    )
    assert r.status_code == 400


def test_nul_in_label_is_422(client):
    r = client.post("/v1/tokens", json={"scopes": ["read"], "label": "a\u0000"}, headers=ADMIN)
    assert r.status_code == 422 and r.json()["errors"][0]["loc"] == "label"
