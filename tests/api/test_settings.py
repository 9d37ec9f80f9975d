"""Settings come from PLUMBLINE_* variables, with the documented defaults."""

from __future__ import annotations

from service.settings import Settings


def test_defaults(monkeypatch):
    for name in (
        "DATABASE_URL",
        "ADMIN_TOKEN",
        "MAX_BODY_BYTES",
        "CORS_ORIGINS",
        "LINK_TTL_SECONDS",
    ):
        monkeypatch.delenv(f"PLUMBLINE_{name}", raising=False)
    s = Settings()
    assert s.database_url == "sqlite:///plumbline.db"
    assert s.admin_token is None
    assert s.max_body_bytes == 64 * 1024 * 1024
    assert s.link_ttl_seconds == 7 * 24 * 3600
    assert s.cors_origins == []


def test_environment(monkeypatch):
    monkeypatch.setenv("PLUMBLINE_DATABASE_URL", "postgresql+psycopg://u@127.0.0.1/db")
    monkeypatch.setenv("PLUMBLINE_ADMIN_TOKEN", "tok-8812")
    monkeypatch.setenv("PLUMBLINE_MAX_BODY_BYTES", "1000")
    monkeypatch.setenv("PLUMBLINE_CORS_ORIGINS", '["https://bi.invalid"]')
    s = Settings()
    assert s.database_url.startswith("postgresql+psycopg")
    assert s.admin_token.get_secret_value() == "tok-8812"
    assert "tok-8812" not in repr(s)
    assert s.max_body_bytes == 1000
    assert s.cors_origins == ["https://bi.invalid"]


def test_cors_origin_is_allowed_when_configured(make_client):
    client = make_client(cors_origins=["https://bi.invalid"])
    r = client.get("/healthz", headers={"Origin": "https://bi.invalid"})
    assert r.headers["access-control-allow-origin"] == "https://bi.invalid"
    other = client.get("/healthz", headers={"Origin": "https://elsewhere.invalid"})
    assert "access-control-allow-origin" not in other.headers
