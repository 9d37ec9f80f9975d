"""Every GET refuses query parameters it does not take, as the POST refuses unknown fields."""

from __future__ import annotations

import re

import pytest

from .helpers import ADMIN


def get_operations(client) -> list[str]:
    """Every GET path of the service's own OpenAPI document, path parameters filled in."""
    paths = []
    for path, operations in client.app.openapi()["paths"].items():
        if "get" in operations:
            paths.append(re.sub(r"\{[^}]+\}", "x", path))
    return paths


def test_every_get_refuses_an_unknown_parameter_and_documents_the_422(client):
    paths = get_operations(client)
    assert "/v1/assessments" in paths and "/v1/models" in paths and "/healthz" in paths
    doc = client.app.openapi()["paths"]
    for path in paths:
        r = client.get(path, params={"no_such_param": "1"}, headers=ADMIN)
        assert r.status_code == 422, (path, r.status_code, r.text)
        assert r.headers["content-type"] == "application/problem+json"
        assert r.json()["errors"][0]["loc"] == "query.no_such_param", path
    for path, operations in doc.items():
        if "get" in operations:
            assert "422" in operations["get"]["responses"], path


def test_a_typo_names_the_parameter_and_suggests_the_known_one(client):
    r = client.get("/v1/assessments", params={"modle": "x"}, headers=ADMIN)
    assert r.status_code == 422
    assert r.json()["errors"] == [
        {
            "loc": "query.modle",
            "message": "unknown query parameter; this endpoint takes cursor, limit, model, "
            "since, until, verdict, version (did you mean 'model'?)",
        }
    ]


def test_a_parameter_given_twice_is_refused(client):
    r = client.get("/v1/assessments?limit=2&limit=3", headers=ADMIN)
    assert r.status_code == 422
    assert r.json()["errors"] == [{"loc": "query.limit", "message": "given 2 times; give it once"}]


def test_an_endpoint_without_parameters_says_so(client):
    r = client.get("/v1/checks", params={"check": "bias"}, headers=ADMIN)
    assert r.status_code == 422
    assert r.json()["errors"] == [
        {"loc": "query.check", "message": "unknown query parameter; this endpoint takes none"}
    ]


@pytest.mark.parametrize(
    ("path", "params", "loc"),
    [
        ("/v1/assessments", {"verdict": "failed"}, "query.verdict"),
        ("/v1/assessments", {"limit": "two"}, "query.limit"),
        ("/v1/assessments", {"since": "5"}, "query.since"),
        ("/v1/models/m/verdict", {"require": "always"}, "query.require"),
        ("/v1/policies/default", {"version": "0"}, "query.version"),
        ("/v1/models", {"verdict": "ok"}, "query.verdict"),
    ],
)
def test_bad_values_name_the_parameter(client, path, params, loc):
    r = client.get(path, params=params, headers=ADMIN)
    assert r.status_code == 422, r.text
    assert [e["loc"] for e in r.json()["errors"]] == [loc]


def test_known_parameters_still_work(client, body):
    assert client.post("/v1/assessments", json=body(1), headers=ADMIN).status_code == 201
    r = client.get("/v1/assessments", params={"model": "loaves-daily", "limit": 1}, headers=ADMIN)
    assert r.status_code == 200 and len(r.json()["items"]) == 1
    r = client.get("/v1/assessments", params={"model": "other"}, headers=ADMIN)
    assert r.status_code == 200 and r.json()["items"] == []


def test_posts_keep_their_own_checks(client, body):
    # The CSV upload names its unknown parameters itself (with the parameters it takes).
    r = client.post(
        "/v1/assessments",
        content="series_id,actual,fitted\na,1,1\n",
        params={"model": "m", "version": "1", "modle": "x"},
        headers={**ADMIN, "Content-Type": "text/csv"},
    )
    assert r.status_code == 422
    assert r.json()["errors"][0]["loc"] == "modle"


def test_without_a_valid_token_the_answer_is_401_whatever_the_parameters(client, body):
    a = client.post("/v1/assessments", json=body(1), headers=ADMIN).json()
    for path in (
        "/v1/assessments",
        f"/v1/assessments/{a['id']}",
        "/v1/models",
        f"/v1/assessments/{a['id']}/report",
    ):
        r = client.get(path, params={"no_such_param": "1"})
        assert r.status_code == 401, (path, r.text)
        r = client.get(path, params={"no_such_param": "1"}, headers={"Authorization": "Bearer x"})
        assert r.status_code == 401, (path, r.text)
    # The probes need no token: checked at once.
    assert client.get("/healthz", params={"x": "1"}).status_code == 422


def test_a_signed_link_with_an_unknown_parameter_is_refused_after_the_link(client, body):
    a = client.post("/v1/assessments", json=body(1), headers=ADMIN).json()
    url = client.post(f"/v1/assessments/{a['id']}/links", headers=ADMIN).json()["url"]
    query = url.split("?", 1)[1]
    ok = client.get(f"/v1/assessments/{a['id']}/report?{query}")
    assert ok.status_code == 200
    r = client.get(f"/v1/assessments/{a['id']}/report?{query}&zoom=2")
    assert r.status_code == 422 and r.json()["errors"][0]["loc"] == "query.zoom"
    forged = client.get(f"/v1/assessments/{a['id']}/report?expires=1&signature=x&zoom=2")
    assert forged.status_code == 403
