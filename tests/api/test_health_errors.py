"""Health, readiness, metrics, the OpenAPI document and the problem+json error shape."""

from __future__ import annotations

from .helpers import ADMIN


def test_healthz_and_readyz_need_no_token(client):
    assert client.get("/healthz").json() == {"status": "ok"}
    r = client.get("/readyz")
    assert r.status_code == 200 and r.json()["status"] == "ready"


def test_readyz_is_503_when_the_database_is_unreachable(tmp_path):
    from fastapi.testclient import TestClient

    from service.api.app import create_app
    from service.settings import Settings

    settings = Settings(
        database_url="postgresql+psycopg://nobody@127.0.0.1:1/none",
        migrate_on_start=False,
        admin_token="x",
    )
    with TestClient(create_app(settings)) as client:
        r = client.get("/readyz")
        assert r.status_code == 503
        assert r.headers["content-type"] == "application/problem+json"
        assert client.get("/healthz").status_code == 200


def test_readyz_is_503_until_the_schema_is_migrated(database_url):
    from fastapi.testclient import TestClient

    from service.api.app import create_app
    from service.settings import Settings
    from service.store.migrate import head_revision, upgrade

    settings = Settings(database_url=database_url, migrate_on_start=False, admin_token="x")
    with TestClient(create_app(settings)) as client:
        r = client.get("/readyz")
        assert r.status_code == 503 and "db upgrade" in r.json()["detail"]
        upgrade(database_url)
        assert client.get("/readyz").json()["schema_revision"] == head_revision()


def test_metrics_count_requests_latencies_and_verdicts(client, body):
    doc = client.post("/v1/assessments", json=body(n=2), headers=ADMIN).json()
    client.get("/v1/assessments/nope", headers=ADMIN)
    text = client.get("/metrics").text
    assert (
        'plumbline_http_requests_total{method="POST",route="/v1/assessments",status="201"} 1.0'
    ) in text
    assert (
        'plumbline_http_requests_total{method="GET",route="/v1/assessments/{assessment_id}"'
        ',status="404"} 1.0'
    ) in text
    assert "plumbline_http_request_duration_seconds_bucket" in text
    assert f'plumbline_assessments_total{{stored="true",verdict="{doc["verdict"]}"}} 1.0' in text
    assert "plumbline_series_assessed_total 2.0" in text


def test_unknown_route_and_method_are_problem_json(client):
    r = client.get("/v1/nothing", headers=ADMIN)
    assert r.status_code == 404
    assert r.headers["content-type"] == "application/problem+json"
    assert set(r.json()) >= {"type", "title", "status", "detail"}
    r = client.put("/v1/assessments", headers=ADMIN)
    assert r.status_code == 405
    assert r.headers["content-type"] == "application/problem+json"


def test_openapi_documents_bodies_and_examples(client):
    doc = client.get("/openapi.json").json()
    post = doc["paths"]["/v1/assessments"]["post"]
    content = post["requestBody"]["content"]
    assert content["application/json"]["schema"]["$ref"].endswith("/AssessmentBody")
    assert "text/csv" in content
    assert len(content["application/json"]["examples"]) >= 3
    assert content["text/csv"]["examples"]
    assert "AssessmentBody" in doc["components"]["schemas"]
    assert "SeriesBody" in doc["components"]["schemas"]
    assert post["responses"]["201"]["content"]["application/json"]["examples"]
    assert post["responses"]["422"]["content"]["application/problem+json"]["examples"]
    assert doc["components"]["securitySchemes"]["bearer"]["scheme"] == "bearer"
    assert post["security"] == [{"bearer": []}]
    assert "security" not in doc["paths"]["/healthz"]["get"]
    for path in (
        "/v1/models/{model}/verdict",
        "/v1/checks",
        "/v1/policies",
        "/v1/tokens",
        "/v1/tokens/{token_id}",
        "/v1/assessments/{assessment_id}/series",
        "/healthz",
        "/readyz",
        "/metrics",
    ):
        assert path in doc["paths"], path


def test_unexpected_error_is_a_problem_500_without_internals(make_client, body, monkeypatch):
    from service.api import assessing

    def explode(*_a, **_k):
        raise RuntimeError("secret internals")

    client = make_client()
    monkeypatch.setattr(assessing, "assess_many_results", explode)
    r = client.post("/v1/assessments", json=body(n=1), headers=ADMIN)
    assert r.status_code == 500
    assert r.headers["content-type"] == "application/problem+json"
    assert "secret" not in r.text
