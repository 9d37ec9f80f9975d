"""The report in a real browser: headless Chromium against the real server on loopback.

Skips when no Chromium is installed (install the Debian package ``chromium``); with
``PLUMBLINE_REQUIRE_BROWSER=1`` (set by CI) it fails instead. Screenshots are saved under
``test-artifacts/`` (or the folder ``PLUMBLINE_TEST_ARTIFACTS`` names), for CI to keep.

Every page must load from the test server alone: the driver lists every request the page made
and none may go to another host.
"""

from __future__ import annotations

import os
import time
from pathlib import Path
from urllib.parse import quote

import httpx
import pytest

from service.links import sign_link

from .devtools import Browser, find_chromium, outside_requests
from .fleet import invented_body

pytestmark = pytest.mark.slow

ARTIFACTS = Path(
    os.environ.get("PLUMBLINE_TEST_ARTIFACTS")
    or Path(__file__).resolve().parents[2] / "test-artifacts"
)


def _need_browser() -> str:
    binary = find_chromium()
    problem = None
    if binary is None:
        problem = (
            "no Chromium found: install the Debian package 'chromium' "
            "(apt-get install -y chromium) or set PLUMBLINE_CHROMIUM"
        )
    else:
        try:
            import websocket  # noqa: F401 - the DevTools connection needs websocket-client
        except ImportError:
            problem = "the websocket-client package is missing (pip install '.[test]')"
    if problem:
        if os.environ.get("PLUMBLINE_REQUIRE_BROWSER") == "1":
            pytest.fail(f"PLUMBLINE_REQUIRE_BROWSER=1 but {problem}")
        pytest.skip(problem)
    return binary  # type: ignore[return-value]


@pytest.fixture(scope="module")
def served(live_server: dict):
    binary = _need_browser()
    url, auth = live_server["url"], live_server["auth"]
    r = httpx.post(f"{url}/v1/assessments", json=invented_body(10), headers=auth, timeout=60)
    assert r.status_code == 201, r.text
    return {
        "url": url,
        "binary": binary,
        "assessment": r.json(),
        "auth": auth,
        "secret": live_server["secret"],
    }


def _check_clean(browser: Browser, what: str, server: str | None = None) -> None:
    assert browser.problems.all() == [], f"{what}: {browser.problems.all()}"
    if server is not None:
        assert browser.requests, f"{what}: no request seen"
        assert outside_requests(browser.requests, server) == [], what


def _wait_until(browser: Browser, condition: str, timeout_ms: int = 20000) -> None:
    """Poll the JavaScript ``condition`` until it is true (the docs pages render after load)."""
    ok = browser.evaluate(
        "new Promise(resolve => { const t0 = Date.now(); (function poll() {"
        f" if ({condition}) {{ resolve(true); return; }}"
        f" if (Date.now() - t0 > {timeout_ms}) {{ resolve(false); return; }}"
        " setTimeout(poll, 100); })(); })",
        await_promise=True,
    )
    assert ok, f"timed out waiting for {condition}"


def _operations(url: str) -> list[tuple[str, str]]:
    doc = httpx.get(f"{url}/openapi.json").json()
    return [
        (method.upper(), path)
        for path, item in doc["paths"].items()
        for method in item
        if method in ("get", "post", "put", "patch", "delete")
    ]


def test_api_docs_render_offline_in_chromium(served: dict) -> None:
    """/docs (Swagger UI) and /redoc render the API from the server's own files: the title and
    every operation shown, no request to any other host, no console error."""
    ARTIFACTS.mkdir(parents=True, exist_ok=True)
    url = served["url"]
    operations = _operations(url)
    assert ("POST", "/v1/assessments") in operations
    with Browser(served["binary"]) as b:
        b.open(f"{url}/docs")
        _wait_until(b, f"document.querySelectorAll('.opblock').length >= {len(operations)}")
        b.evaluate("new Promise(r => setTimeout(r, 500))", await_promise=True)
        shown = b.evaluate("""({
            title: document.querySelector('.info .title').textContent,
            ops: Array.from(document.querySelectorAll('.opblock-summary')).map(s => [
                s.querySelector('.opblock-summary-method').textContent.trim(),
                s.querySelector('.opblock-summary-path').dataset.path]),
        })""")
        assert shown["title"].startswith("Plumbline")
        assert sorted(map(tuple, shown["ops"])) == sorted(operations)
        _check_clean(b, "/docs", url)
        b.screenshot(str(ARTIFACTS / "docs.png"))

        b.open(f"{url}/redoc")
        _wait_until(b, "document.querySelectorAll('[data-section-id^=\"operation/\"]').length > 0")
        b.evaluate("new Promise(r => setTimeout(r, 500))", await_promise=True)
        shown = b.evaluate("""({
            title: document.querySelector('h1').textContent,
            ops: document.querySelectorAll('[data-section-id^="operation/"]').length,
            text: document.body.innerText,
        })""")
        assert shown["title"].startswith("Plumbline")
        assert shown["ops"] == len(operations)
        assert "/v1/assessments" in shown["text"]
        _check_clean(b, "/redoc", url)
        b.screenshot(str(ARTIFACTS / "redoc.png"))


def test_report_and_series_page_in_chromium(served: dict) -> None:
    ARTIFACTS.mkdir(exist_ok=True)
    a = served["assessment"]
    url = served["url"]
    link = httpx.post(f"{url}/v1/assessments/{a['id']}/links", headers=served["auth"])
    assert link.status_code == 200, link.text
    with Browser(served["binary"]) as b:
        # 1. With the bearer token in the request headers.
        b.call("Network.setExtraHTTPHeaders", headers=served["auth"])
        b.open(f"{url}/v1/assessments/{a['id']}/report")
        _check_clean(b, "report with bearer token")
        assert b.evaluate("document.querySelector('.verdict').dataset.verdict") == a["verdict"]
        b.call("Network.setExtraHTTPHeaders", headers={})

        # 2. Through the signed link, no token at all.
        b.open(link.json()["url"])
        _check_clean(b, "report through signed link")
        page = b.evaluate("""({
            verdict: document.querySelector('.verdict').textContent.trim(),
            reasons: Array.from(document.querySelectorAll('#reasons li'))
                          .map(li => li.textContent),
            checks: Array.from(document.querySelectorAll('#checks-table tbody tr'))
                         .map(tr => tr.dataset.check),
            series: Array.from(document.querySelectorAll('#series-table tbody tr'))
                         .map(tr => tr.dataset.series),
            svgs: document.querySelectorAll('svg').length,
        })""")
        assert page["verdict"].lower() == a["verdict"] == "fail"
        assert len(page["reasons"]) == min(len(a["reasons"]), 20)
        for reason, shown in zip(a["reasons"], page["reasons"], strict=False):
            assert reason["message"].split(": ", 1)[-1] in shown
        assert page["checks"] == [c["name"] for c in a["checks"]]
        assert len(page["series"]) == len(a["series"])
        fleet = b.evaluate("""Array.from(document.querySelectorAll(
            '#fleet-charts-section figure.chart')).map(f => {
            const s = f.querySelector('svg').getBoundingClientRect();
            return {name: f.dataset.chart, w: s.width, h: s.height};
        })""")
        assert [c["name"] for c in fleet] == ["grid", "bias", "pvalues"]
        assert page["svgs"] == 3  # the fleet's charts; each series' wait for its page
        assert all(c["w"] > 900 and c["h"] > 200 for c in fleet), fleet
        assert outside_requests(b.requests, url) == []
        b.screenshot(str(ARTIFACTS / "report.png"))

        # The sort script runs: sorting by series id puts the ids in order.
        b.evaluate("document.querySelector('#series-table th').click()")
        desc = b.evaluate(
            "Array.from(document.querySelectorAll('#series-table tbody tr'))"
            ".map(tr => tr.dataset.series)"
        )
        assert desc == sorted(page["series"], key=str.lower, reverse=True)

        # 3. Open the worst series from the list: the link carries the signature along.
        worst = page["series"][0]
        b.evaluate(
            f"document.querySelector('#series-table tbody tr[data-series=\"{worst}\"] a').click()"
        )
        b.wait_for("Page.loadEventFired")
        b.evaluate("new Promise(r => setTimeout(r, 300))", await_promise=True)
        _check_clean(b, "series page")
        charts = b.evaluate("""Array.from(document.querySelectorAll('figure.chart')).map(f => {
            const s = f.querySelector('svg').getBoundingClientRect();
            return {name: f.dataset.chart, w: s.width, h: s.height,
                    title: f.querySelector('svg').getAttribute('aria-label')};
        })""")
        assert [c["name"] for c in charts] == ["residuals", "acf", "histogram", "fitted", "holdout"]
        assert all(c["w"] > 300 and c["h"] > 150 for c in charts), charts
        assert b.evaluate("document.querySelector('h1').textContent") == f"Series {worst}"
        assert outside_requests(b.requests, url) == []
        b.screenshot(str(ARTIFACTS / "series.png"))


def test_large_fleet_and_long_series_in_chromium(served: dict) -> None:
    """1,200 series of 700 weeks: the fleet page's charts drawn in bins, and a series page whose
    residual chart draws a line and the mean residual; all from the test server alone."""
    ARTIFACTS.mkdir(parents=True, exist_ok=True)
    url, auth = served["url"], served["auth"]
    body = invented_body(1200, t=700, h=4, seed=8)
    body["model"] = "larkspur-oat-milk-long"
    r = httpx.post(f"{url}/v1/assessments", json=body, headers=auth, timeout=180)
    assert r.status_code == 201, r.text[:500]
    a = r.json()
    with Browser(served["binary"]) as b:
        b.call("Network.setExtraHTTPHeaders", headers=auth)
        b.open(f"{url}/v1/assessments/{a['id']}/report")
        _check_clean(b, "report of 1,200 series", url)
        shown = b.evaluate("""({
            charts: Array.from(document.querySelectorAll('#fleet-charts-section figure.chart'))
                .map(f => ({name: f.dataset.chart,
                            text: f.querySelector('svg').textContent,
                            h: f.querySelector('svg').getBoundingClientRect().height})),
            rows: document.querySelectorAll('#series-table tbody tr').length,
        })""")
        assert shown["rows"] == 1200
        names = [c["name"] for c in shown["charts"]]
        assert names == ["grid", "bias", "pvalues"]
        grid = shown["charts"][0]["text"]
        assert "1,141–1,200" in grid and "Share of the bin's series that fail" in grid
        assert all(c["h"] > 200 for c in shown["charts"])
        b.screenshot(str(ARTIFACTS / "report-1200-charts.png"), "#fleet-charts-section")

        sid = next(s["id"] for s in body["series"] if s["id"].endswith("-biased"))
        b.open(f"{url}/v1/assessments/{a['id']}/report/series/{quote(sid, safe='')}")
        _check_clean(b, "series of 700 weeks", url)
        chart = b.evaluate("""(() => {
            const svg = document.querySelector('#chart-residuals svg');
            return {text: svg.textContent, markers: svg.querySelectorAll('use').length,
                    w: svg.getBoundingClientRect().width};
        })()""")
        assert "mean residual" in chart["text"] and "tracking-signal window" in chart["text"]
        assert chart["markers"] < 60 and chart["w"] > 300  # a line, not 700 markers
        b.screenshot(str(ARTIFACTS / "series-700-charts.png"), "#charts-section")


def test_expired_and_tampered_links_answer_403(served: dict) -> None:
    a, url = served["assessment"], served["url"]
    report = f"{url}/v1/assessments/{a['id']}/report"
    expired = sign_link(
        secret=served["secret"], assessment_id=a["id"], ttl_seconds=60, now=time.time() - 3600
    )
    good = sign_link(secret=served["secret"], assessment_id=a["id"], ttl_seconds=600)
    tampered = good.query.replace("signature=", "signature=x", 1)
    with Browser(served["binary"]) as b:
        for query, slug in ((expired.query, "link-expired"), (tampered, "link-invalid")):
            b.open(f"{report}?{query}")
            assert any("HTTP 403" in p for p in b.problems.failed_requests), b.problems
            b.problems.failed_requests.clear()
            b.problems.console_errors.clear()
            r = httpx.get(f"{report}?{query}")
            assert r.status_code == 403
            assert r.headers["content-type"].startswith("application/problem+json")
            assert r.json()["type"].endswith(slug)
            assert r.json()["status"] == 403
