"""Policies (named, versioned) and the checks catalogue."""

from __future__ import annotations

import pytest

from service.core import CATALOGUE, CHECK_NAMES
from service.core.policy import default_policy

from .helpers import ADMIN

STRICT = {
    "name": "strict-daily",
    "description": "fail on warn-level evidence",
    "checks": {"ljung_box": {"warn_p": 0.1, "fail_p": 0.05}},
}


def test_posting_a_name_again_makes_the_next_version(client):
    r1 = client.post("/v1/policies", json=STRICT, headers=ADMIN)
    assert r1.status_code == 201, r1.text
    assert r1.json()["version"] == 1 and r1.json()["name"] == "strict-daily"
    r2 = client.post("/v1/policies", json={**STRICT, "description": "v2"}, headers=ADMIN)
    assert r2.json()["version"] == 2
    latest = client.get("/v1/policies/strict-daily", headers=ADMIN).json()
    assert latest["version"] == 2 and latest["document"]["description"] == "v2"
    first = client.get("/v1/policies/strict-daily?version=1", headers=ADMIN).json()
    assert first["document"]["checks"]["ljung_box"]["fail_p"] == 0.05
    names = [p["name"] for p in client.get("/v1/policies", headers=ADMIN).json()["items"]]
    assert names == ["default", "strict-daily"]


def test_stored_policy_is_used_by_name_and_pinned_version(client, body):
    client.post("/v1/policies", json=STRICT, headers=ADMIN)
    client.post(
        "/v1/policies", json={**STRICT, "checks": {"bias": {"enabled": False}}}, headers=ADMIN
    )
    b = body(n=2)
    b["policy"] = "strict-daily"
    doc = client.post("/v1/assessments", json=b, headers=ADMIN).json()
    assert doc["policy"] == {"name": "strict-daily", "version": 2}
    assert "bias" not in [c["name"] for c in doc["checks"]]
    b["policy"] = "strict-daily@1"
    doc = client.post("/v1/assessments", json=b, headers=ADMIN).json()
    assert doc["policy"] == {"name": "strict-daily", "version": 1}
    assert "bias" in [c["name"] for c in doc["checks"]]


def test_unknown_pinned_version_is_422(client, body):
    b = body(n=1)
    b["policy"] = "default@7"
    r = client.post("/v1/assessments", json=b, headers=ADMIN)
    assert r.status_code == 422 and r.json()["errors"][0]["loc"] == "policy"


def test_inline_policy(client, body):
    b = body(n=1)
    b["policy"] = {"name": "adhoc", "checks": {"jarque_bera": {"enabled": False}}}
    r = client.post("/v1/assessments", json=b, headers=ADMIN)
    assert r.status_code == 201
    assert r.json()["policy"]["name"] == "adhoc"
    assert "jarque_bera" not in [c["name"] for c in r.json()["checks"]]


def test_default_is_builtin_until_overridden(client):
    r = client.get("/v1/policies/default", headers=ADMIN).json()
    assert r["builtin"] is True and r["version"] == 1
    assert r["document"] == default_policy().to_dict()
    stored = client.post(
        "/v1/policies", json={"name": "default", "fleet": {"fail_share": 0.1}}, headers=ADMIN
    ).json()
    assert stored["version"] == 2
    assert client.get("/v1/policies/default", headers=ADMIN).json()["version"] == 2
    assert client.get("/v1/policies/default?version=1", headers=ADMIN).json()["builtin"]


@pytest.mark.parametrize(
    ("doc", "loc"),
    [
        ({"checks": {}}, "name"),
        ({"name": "has space"}, "name"),
        ({"name": "ok", "checks": {"ljung_box": {"fail_p": 2}}}, "checks.ljung_box.fail_p"),
        ({"name": "ok", "checks": {"nope": {}}}, "checks.nope"),
        ({"name": "ok", "fleet": {"weighting": "heavy"}}, "fleet.weighting"),
        ({"name": "ok", "colour": 1}, "colour"),
    ],
)
def test_invalid_policies_are_422_naming_the_field(client, doc, loc):
    r = client.post("/v1/policies", json=doc, headers=ADMIN)
    assert r.status_code == 422, r.text
    assert loc in [e["loc"] for e in r.json()["errors"]]


def test_policy_writes_need_admin(client, token):
    r = client.post("/v1/policies", json=STRICT, headers=token("submit", "read"))
    assert r.status_code == 403


def test_policy_body_errors(client):
    r = client.post(
        "/v1/policies", content=b"name=x", headers={**ADMIN, "Content-Type": "text/plain"}
    )
    assert r.status_code == 415
    r = client.post(
        "/v1/policies", content=b"{", headers={**ADMIN, "Content-Type": "application/json"}
    )
    assert r.status_code == 400
    r = client.post("/v1/policies", json=[1], headers=ADMIN)
    assert r.status_code == 422


def test_unknown_policy_is_404(client):
    assert client.get("/v1/policies/nope", headers=ADMIN).status_code == 404
    assert client.get("/v1/policies/default?version=3", headers=ADMIN).status_code == 404


def test_checks_catalogue(client):
    r = client.get("/v1/checks", headers=ADMIN)
    assert r.status_code == 200
    doc = r.json()
    assert [c["name"] for c in doc["checks"]] == list(CHECK_NAMES)
    by_name = {c["name"]: c for c in doc["checks"]}
    for spec in CATALOGUE:
        item = by_name[spec.name]
        assert item["source"] == spec.source and item["tests"] == spec.tests
        assert item["default_policy"] == default_policy().to_dict()["checks"][spec.name]
    assert by_name["ljung_box"]["default_policy"]["fail_p"] == 0.01
    assert doc["default_policy"]["name"] == "default"


def test_pinned_version_beyond_the_database_integers_is_422(client, body):
    b = body(n=1)
    b["policy"] = "default@99999999999999999999"
    r = client.post("/v1/assessments", json=b, headers=ADMIN)
    assert r.status_code == 422 and r.json()["errors"][0]["loc"] == "policy"
