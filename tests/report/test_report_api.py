"""The report endpoints in-process: access by token and by signed link, pages, errors."""

from __future__ import annotations

import re
import subprocess
import sys
import textwrap
import time
from datetime import UTC, datetime
from urllib.parse import parse_qs, quote, urlsplit

import httpx
import pytest
from fastapi.testclient import TestClient

from service.api.app import create_app
from service.links import sign_link
from service.settings import Settings

from .fleet import invented_body

ADMIN = "report-test-admin-token-3d9a"
SECRET = "report-test-link-secret-19fe77c0"
AUTH = {"Authorization": f"Bearer {ADMIN}"}


def _settings(database_url: str, **extra) -> Settings:
    return Settings(database_url=database_url, admin_token=ADMIN, link_secret=SECRET, **extra)


@pytest.fixture
def client(database_url: str):
    # A fresh database per test, on SQLite and on PostgreSQL (tests/conftest.py).
    with TestClient(create_app(_settings(database_url))) as c:
        yield c


@pytest.fixture
def stored(client) -> dict:
    r = client.post("/v1/assessments", json=invented_body(6), headers=AUTH)
    assert r.status_code == 201, r.text
    return r.json()


def _token(client, *scopes: str) -> dict:
    r = client.post(
        "/v1/tokens", json={"scopes": list(scopes), "label": "report test"}, headers=AUTH
    )
    assert r.status_code in (200, 201), r.text
    return {"Authorization": f"Bearer {r.json()['token']}"}


def _problem(r, status: int) -> dict:
    assert r.status_code == status, r.text
    assert r.headers["content-type"].startswith("application/problem+json")
    body = r.json()
    assert body["status"] == status and body["detail"]
    return body


def test_report_with_read_token(client, stored) -> None:
    read = _token(client, "read")
    r = client.get(f"/v1/assessments/{stored['id']}/report", headers=read)
    assert r.status_code == 200
    assert r.headers["content-type"] == "text/html; charset=utf-8"
    assert "default-src 'none'" in r.headers["content-security-policy"]
    assert r.headers["x-content-type-options"] == "nosniff"
    assert f'data-verdict="{stored["verdict"]}"' in r.text
    for s in stored["series"]:
        assert f'<tr data-series="{s["id"]}">' in r.text
        # In-page links go to the series page, the id as one path segment.
        assert f'/v1/assessments/{stored["id"]}/report/series/{quote(s["id"], safe="")}"' in r.text


def test_report_needs_a_token_with_read(client, stored) -> None:
    path = f"/v1/assessments/{stored['id']}/report"
    _problem(client.get(path), 401)
    _problem(client.get(path, headers={"Authorization": "Bearer nope"}), 401)
    _problem(client.get(path, headers=_token(client, "submit")), 403)
    _problem(client.post(f"/v1/assessments/{stored['id']}/links"), 401)
    _problem(
        client.post(f"/v1/assessments/{stored['id']}/links", headers=_token(client, "submit")), 403
    )


def test_unknown_assessment_and_series_are_404(client, stored) -> None:
    _problem(client.get("/v1/assessments/nope/report", headers=AUTH), 404)
    _problem(client.get("/v1/assessments/nope/report/series/x", headers=AUTH), 404)
    _problem(client.post("/v1/assessments/nope/links", headers=AUTH), 404)
    body = _problem(
        client.get(f"/v1/assessments/{stored['id']}/report/series/nope", headers=AUTH), 404
    )
    assert "nope" in body["detail"]


def test_series_page_draws_every_chart_and_caches_them(client, stored) -> None:
    sid = stored["series"][1]["id"]  # "cafe-02/oat-milk-autocorrelated": a slash in the id
    path = f"/v1/assessments/{stored['id']}/report/series/{quote(sid, safe='')}"
    r = client.get(path, headers=AUTH)
    assert r.status_code == 200, r.text
    for name in ("residuals", "acf", "histogram", "fitted", "holdout"):
        assert f'data-chart="{name}"' in r.text
    assert f"<h1>Series {sid}</h1>" in r.text
    assert f'href="/v1/assessments/{stored["id"]}/report"' in r.text
    cache = client.app.state.services.chart_cache
    assert (cache.hits, cache.misses) == (0, 1)
    again = client.get(path, headers=AUTH)
    assert again.text == r.text and (cache.hits, cache.misses) == (1, 1)


@pytest.mark.slow  # draws every chart
def test_signed_link_opens_only_that_report(client, stored) -> None:
    other = client.post("/v1/assessments", json=invented_body(2, seed=11), headers=AUTH).json()
    before = time.time()
    r = client.post(f"/v1/assessments/{stored['id']}/links", headers=_token(client, "read"))
    assert r.status_code == 200, r.text
    url = urlsplit(r.json()["url"])
    assert url.path == f"/v1/assessments/{stored['id']}/report"
    q = {k: v[0] for k, v in parse_qs(url.query).items()}
    assert set(q) == {"expires", "signature"}
    # Default expiry: 7 days (the link_ttl_seconds setting).
    expires_at = datetime.fromisoformat(r.json()["expires_at"].replace("Z", "+00:00"))
    assert expires_at.tzinfo == UTC
    assert abs(expires_at.timestamp() - (before + 7 * 86400)) < 5
    assert int(q["expires"]) == int(expires_at.timestamp())

    page = client.get(f"{url.path}?{url.query}")  # no token
    assert page.status_code == 200
    # Series links inside the page carry the signature, and open without a token.
    sid = stored["series"][0]["id"]
    series_path = f"{url.path}/series/{quote(sid, safe='')}?{url.query}"
    assert series_path.replace("&", "&amp;") in page.text
    series_page = client.get(series_path)
    assert series_page.status_code == 200
    # Its own links (back, previous, next) keep the signature too.
    hrefs = re.findall(r'<a (?:rel="\w+" )?href="([^"]+)"', series_page.text)
    assert len(hrefs) >= 2
    for href in hrefs:
        assert href.endswith("?" + url.query.replace("&", "&amp;")), href
        assert client.get(href.replace("&amp;", "&")).status_code == 200
    # Not another assessment's report, nor the JSON of this one.
    _problem(client.get(f"/v1/assessments/{other['id']}/report?{url.query}"), 403)
    _problem(client.get(f"/v1/assessments/{stored['id']}?{url.query}"), 401)


def test_expired_and_tampered_links_are_403(client, stored) -> None:
    path = f"/v1/assessments/{stored['id']}/report"
    old = sign_link(
        secret=SECRET, assessment_id=stored["id"], ttl_seconds=60, now=time.time() - 120
    )
    body = _problem(client.get(f"{path}?{old.query}"), 403)
    assert body["type"].endswith("link-expired") and "expired" in body["detail"]
    _problem(client.get(f"{path}/series/x?{old.query}"), 403)
    good = sign_link(secret=SECRET, assessment_id=stored["id"], ttl_seconds=60)
    for query in (
        f"expires={good.expires + 1}&signature={good.signature}",
        f"expires={good.expires}&signature={good.signature[::-1]}",
        f"expires={good.expires}",
        f"signature={good.signature}",
        f"expires=tomorrow&signature={good.signature}",
    ):
        body = _problem(client.get(f"{path}?{query}"), 403)
        assert body["type"].endswith("link-invalid")
    # A link signed with another key (another server) does not open it either.
    foreign = sign_link(
        secret="another-servers-secret-abcdef", assessment_id=stored["id"], ttl_seconds=60
    )
    _problem(client.get(f"{path}?{foreign.query}"), 403)


def test_link_ttl_is_configurable(database_url: str) -> None:
    with TestClient(create_app(_settings(database_url, link_ttl_seconds=3600))) as c:
        a = c.post("/v1/assessments", json=invented_body(2), headers=AUTH).json()
        r = c.post(f"/v1/assessments/{a['id']}/links", headers=AUTH)
        q = parse_qs(urlsplit(r.json()["url"]).query)
        assert abs(int(q["expires"][0]) - (time.time() + 3600)) < 5
        short = c.post(f"/v1/assessments/{a['id']}/links", json={"ttl_seconds": 60}, headers=AUTH)
        assert (
            abs(
                int(parse_qs(urlsplit(short.json()["url"]).query)["expires"][0])
                - (time.time() + 60)
            )
            < 5
        )
        body = _problem(
            c.post(f"/v1/assessments/{a['id']}/links", json={"ttl_seconds": 7200}, headers=AUTH),
            422,
        )
        assert body["errors"][0]["loc"] == "ttl_seconds"
        body = _problem(
            c.post(f"/v1/assessments/{a['id']}/links", json={"ttl_seconds": 0}, headers=AUTH), 422
        )
        assert "ttl_seconds" in body["errors"][0]["loc"]
        body = _problem(
            c.post(f"/v1/assessments/{a['id']}/links", json={"ttl": 60}, headers=AUTH), 422
        )
        assert body["errors"][0]["loc"] == "ttl"
        _problem(
            c.post(
                f"/v1/assessments/{a['id']}/links",
                content=b"{",
                headers={**AUTH, "Content-Type": "application/json"},
            ),
            400,
        )


def test_openapi_documents_the_report_endpoints(client) -> None:
    doc = client.get("/openapi.json").json()
    report = doc["paths"]["/v1/assessments/{assessment_id}/report"]["get"]
    assert {p["name"] for p in report["parameters"]} >= {"expires", "signature"}
    assert "text/html" in report["responses"]["200"]["content"]
    assert "/v1/assessments/{assessment_id}/links" in doc["paths"]


@pytest.mark.slow  # a fresh interpreter
def test_assessing_does_not_load_matplotlib(tmp_path) -> None:
    code = textwrap.dedent(f"""
        import sys
        from fastapi.testclient import TestClient
        from service.api.app import create_app
        from service.settings import Settings
        from tests.report.fleet import invented_body
        s = Settings(database_url="sqlite:///{tmp_path / "lazy.db"}", admin_token="{ADMIN}",
                     link_secret="{SECRET}")
        auth = {{"Authorization": "Bearer {ADMIN}"}}
        with TestClient(create_app(s)) as c:
            a = c.post("/v1/assessments", json=invented_body(3), headers=auth).json()
            assert c.get(f"/v1/assessments/{{a['id']}}", headers=auth).status_code == 200
            assert "matplotlib" not in sys.modules, "matplotlib loaded before any chart"
            # The fleet page draws the fleet's charts: the first chart loads it.
            assert c.get(f"/v1/assessments/{{a['id']}}/report", headers=auth).status_code == 200
            assert "matplotlib" in sys.modules
            sid = a["series"][0]["id"].replace("/", "%2F")
            r = c.get(f"/v1/assessments/{{a['id']}}/report/series/{{sid}}", headers=auth)
            assert r.status_code == 200
    """)
    done = subprocess.run(
        [sys.executable, "-c", code],
        capture_output=True,
        text=True,
        cwd=str(__import__("pathlib").Path(__file__).resolve().parents[2]),
    )
    assert done.returncode == 0, done.stderr[-3000:]


@pytest.mark.slow  # draws every chart
def test_awkward_series_ids_round_trip(client) -> None:
    body = invented_body(2)
    body["series"][0]["id"] = "depot 4/sku#118?size=1l&x=y"
    a = client.post("/v1/assessments", json=body, headers=AUTH).json()
    link = client.post(f"/v1/assessments/{a['id']}/links", headers=AUTH).json()
    page = client.get(link["url"])
    assert page.status_code == 200
    href = re.search(
        r'<tr data-series="depot[^"]*"><td class="id"><a href="([^"]+)"', page.text
    ).group(1)
    r = client.get(href.replace("&amp;", "&"))
    assert r.status_code == 200, r.text
    assert "<h1>Series depot 4/sku#118?size=1l&amp;x=y</h1>" in r.text


@pytest.mark.slow  # a real server process
def test_percent_in_a_series_id_over_the_real_server(live_server) -> None:
    # The in-process client decodes a path twice, so ids with "%" are checked over HTTP.
    url, auth = live_server["url"], live_server["auth"]
    body = invented_body(2)
    body["series"][0]["id"] = "sku 50%/x=%2F"
    a = httpx.post(f"{url}/v1/assessments", json=body, headers=auth).json()
    page = httpx.get(f"{url}/v1/assessments/{a['id']}/report", headers=auth)
    href = re.search(
        r'<tr data-series="sku[^"]*"><td class="id"><a href="([^"]+)"', page.text
    ).group(1)
    assert href.endswith("/series/sku%2050%25%2Fx%3D%252F")
    r = httpx.get(url + href, headers=auth)
    assert r.status_code == 200, r.text
    assert "<h1>Series sku 50%/x=%2F</h1>" in r.text


def test_without_a_configured_secret_one_is_made_once_and_kept(database_url: str) -> None:
    from service.store import make_engine
    from service.store import repository as repo

    plain = {"database_url": database_url, "admin_token": ADMIN}
    with TestClient(create_app(Settings(**plain))) as first:
        a = first.post("/v1/assessments", json=invented_body(2), headers=AUTH).json()
        url = first.post(f"/v1/assessments/{a['id']}/links", headers=AUTH).json()["url"]
        assert first.get(url).status_code == 200
    # A restart (or another worker) on the same database opens the same link.
    with TestClient(create_app(Settings(**plain))) as second:
        assert second.get(url).status_code == 200
    # A configured secret takes precedence: the old link no longer verifies.
    with TestClient(create_app(Settings(**plain, link_secret=SECRET))) as third:
        _problem(third.get(url), 403)
    engine = make_engine(database_url)
    try:
        kept = repo.get_or_create_secret(engine, name="report_links", make=lambda: "unused")
        assert len(kept) >= 43  # 32 random bytes, URL-safe base64
    finally:
        engine.dispose()


def test_concurrent_secret_creation_keeps_one_value(database_url: str) -> None:
    from service.store import make_engine
    from service.store import repository as repo
    from service.store.migrate import upgrade

    upgrade(database_url)
    engine = make_engine(database_url)
    try:

        def racing() -> str:
            # Another worker stores its key between our read and our insert.
            repo.get_or_create_secret(engine, name="k", make=lambda: "stored-by-the-other")
            return "ours"

        other = "stored-by-the-other"
        assert repo.get_or_create_secret(engine, name="k", make=racing) == other
        assert repo.get_or_create_secret(engine, name="k", make=lambda: "x") == other
    finally:
        engine.dispose()
