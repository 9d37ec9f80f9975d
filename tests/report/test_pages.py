"""The HTML pages: content, order, escaping, self-containment."""

from __future__ import annotations

import base64
import hashlib
import re
from html import escape
from html.parser import HTMLParser
from urllib.parse import quote

import pytest

from service.core import CATALOGUE
from service.report import (
    CONTENT_SECURITY_POLICY,
    SeriesInputs,
    find_series,
    neighbours,
    render_charts,
    render_report,
    render_series,
    series_diagnostics,
    series_order,
)
from service.results import SeriesCheck, SeriesResult, SeriesTable, Status

from .fleet import document_of, invented_body


def href(sid: str) -> str:
    return "/r/series/" + quote(sid, safe="")


class Collect(HTMLParser):
    """Every start tag with its attributes, and the text of each element with an id."""

    def __init__(self) -> None:
        super().__init__()
        self.tags: list[tuple[str, dict]] = []

    def handle_starttag(self, tag, attrs):
        self.tags.append((tag, dict(attrs)))


def tags(html: str) -> list[tuple[str, dict]]:
    p = Collect()
    p.feed(html)
    return p.tags


@pytest.fixture(scope="module")
def report(document) -> str:
    return render_report(document, series_href=href)


def test_report_shows_verdict_reasons_checks_and_bias(assessment: dict, report: str) -> None:
    assert f'data-verdict="{assessment["verdict"]}"' in report
    assert assessment["verdict"] == "fail"  # the invented fleet plants failures
    titles = {spec.name: spec.title for spec in CATALOGUE}
    items = re.findall(r'<li data-status="(\w+)" data-check="(\w+)">(.*?)</li>', report)
    assert len(items) == min(len(assessment["reasons"]), 500)
    for r, (status, check, html) in zip(assessment["reasons"], items, strict=False):
        assert (status, check) == (r["status"], r["check"])
        # The check in words, where (a series or the fleet), then the sentence once.
        assert f"<strong>{titles[check]}</strong>, " in html
        text = r["message"].removeprefix(f"{titles[check]}: ")
        assert html.endswith(": " + escape(text, quote=True))
        assert (r["series_id"] is None) == ("across the fleet" in html)
    for c in assessment["checks"]:
        row = re.search(rf'<tr data-check="{c["name"]}">(.*?)</tr>', report).group(1)
        cells = re.findall(r"<td[^>]*>(.*?)</td>", row)
        assert cells[2:5] == [
            str(c["series_tested"]),
            str(c["series_failed"]),
            str(c["series_warned"]),
        ]
        assert cells[6] == f"{100 * c['failed_share']:.1f}%"
        # The last cell adds to the counts beside it, never repeats them.
        assert "series fail" not in cells[7] and "of the weight" not in cells[7]
        if c["series_failed"] == c["series_warned"] == 0:
            assert cells[7] == "—"
        else:
            assert cells[7].startswith(("Above the fail share", "Above the warn share")), cells[7]
    b = assessment["fleet"]["bias"]
    assert f"{b['mean_error']:.4g}" in report
    assert "statistical evidence, not a guarantee" in report
    assert "assessed 2026-12-01 22:00 UTC" in report  # created_at 2026-12-01T22:00:00Z


def test_fleet_reasons_say_across_the_fleet_once() -> None:
    """A fleet-level test's sentence begins "Across the fleet ...": the report's line says
    "<Title>, across the fleet: the forecasts run ...", not the phrase twice."""
    import numpy as np

    from service.core import make_batch
    from service.core.gate import assess
    from service.core.policy import default_policy
    from service.results import AssessmentDocument

    # Invented: 30 kiosks whose forecasts all run 0.2 sd low (seed 3).
    rng = np.random.default_rng(3)
    fitted = np.full((30, 52), 100.0)
    batch = make_batch(fitted + rng.normal(0.2, 1.0, fitted.shape), fitted)
    result = assess(batch, default_policy()).to_dict()
    fleet = [r for r in result["reasons"] if r["series_id"] is None]
    assert any(r["message"].startswith("Across the fleet") for r in fleet)
    doc = AssessmentDocument.from_dict(
        {
            "id": None,
            "created_at": None,
            "model": "kiosks",
            "version": "1",
            "stored": False,
            "labels": {},
            "season_length": 1,
            "model_params": 0,
            **result,
        }
    )
    html = render_report(doc, series_href=href)
    lines = re.findall(r'<li data-status="\w+" data-check="\w+">(.*?)</li>', html)
    assert lines and all(line.lower().count("across the fleet") <= 1 for line in lines)
    assert "<strong>Bias</strong>, across the fleet: the forecasts run low: " in html


def test_series_listed_worst_first_with_links(assessment: dict, document, report: str) -> None:
    listed = re.findall(r'<tr data-series="([^"]+)">', report)
    assert sorted(listed) == sorted(s["id"] for s in assessment["series"])
    verdicts = [find_series(document, sid).verdict for sid in listed]
    rank = {"fail": 0, "warn": 1, "pass": 2}
    assert [rank[v] for v in verdicts] == sorted(rank[v] for v in verdicts)
    assert f'href="{href(listed[0])}"' in report
    assert "%2F" in href(listed[0])  # ids with a slash stay one path segment


def test_series_order_breaks_ties_by_failed_checks_then_weight() -> None:
    def s(sid, verdict, fails, weight):
        # Two checks, the first ``fails`` of them failed, the others passed.
        return SeriesResult(
            id=sid,
            verdict=Status(verdict),
            n_obs=52,
            weight=weight,
            sections={},
            checks=tuple(
                SeriesCheck(
                    f"c{i}", Status.FAIL if i < fails else Status.PASS, None, None, None, {}, ""
                )
                for i in range(2)
            ),
        )

    rows = SeriesTable.of(
        [
            s("a", "pass", 0, 9),
            s("b", "fail", 1, 5),
            s("c", "fail", 2, 1),
            s("d", "fail", 1, 50),
            s("e", "warn", 0, 1),
        ]
    )
    assert [r.id for r in series_order(rows)] == ["c", "d", "b", "e", "a"]


def test_report_is_self_contained(report: str) -> None:
    for tag, attrs in tags(report):
        assert tag not in ("link", "img", "iframe", "object", "embed") or (
            tag == "link" and attrs.get("href") == "data:,"
        ), tag
        if tag == "script":
            assert "src" not in attrs
        for name in ("src", "href"):
            value = attrs.get(name) or ""
            assert not re.match(r"(https?:)?//", value), value
    assert "@import" not in report and "url(" not in report.split("<svg")[0]


def test_inline_script_is_allowed_by_the_content_security_policy(report: str) -> None:
    scripts = re.findall(r"<script>(.*?)</script>", report, flags=re.S)
    assert len(scripts) == 1
    # CSP level 2: a 'sha256-...' source is the base64 SHA-256 of the script's text.
    digest = base64.b64encode(hashlib.sha256(scripts[0].encode()).digest()).decode()
    assert f"'sha256-{digest}'" in CONTENT_SECURITY_POLICY
    assert "default-src 'none'" in CONTENT_SECURITY_POLICY


def test_untrusted_text_is_escaped() -> None:
    body = invented_body(2)
    body["series"][0]["id"] = '<script>alert("x")</script>'
    body["labels"] = {"run": "<b>9</b>"}
    a = document_of(body)
    html = render_report(a, series_href=href)
    assert '<script>alert("x")</script>' not in html
    assert "&lt;script&gt;alert(&quot;x&quot;)&lt;/script&gt;" in html
    assert "<b>9</b>" not in html
    sid = body["series"][0]["id"]
    page = render_series(a, find_series(a, sid), (), report_href="/r")
    assert '<script>alert("x")</script>' not in page


@pytest.mark.slow  # a 10,000-series report
def test_large_fleet_report_stays_light() -> None:
    # 10,000 series: rows and links, and three fleet charts of bounded size; the series'
    # own charts wait for the series page.
    from service.report.fleet_charts import render_fleet_charts

    a = document_of(invented_body(10_000, t=30, h=4))
    assert "<svg" not in render_report(a, series_href=href)
    charts = render_fleet_charts(a)
    html = render_report(a, series_href=href, fleet_charts=charts)
    assert html.count("<svg") == 3
    assert sum(len(c.svg) for c in charts) < 400_000
    assert html.count('<tr data-series="') == 10_000
    assert html.count('<ul class="reasons"') == 2  # the first 20, then the toggle
    assert "more reasons: see the series table" in html


def test_series_page(body: dict, document) -> None:
    s = body["series"][1]
    entry = find_series(document, s["id"])
    d = series_diagnostics(SeriesInputs.from_mapping(s), entry, season_length=52, model_params=2)
    page = render_series(document, entry, render_charts(d), report_href="/r?x=1&y=2")
    assert 'href="/r?x=1&amp;y=2"' in page
    assert f'data-verdict="{entry.verdict}"' in page
    for name in ("residuals", "acf", "histogram", "fitted", "holdout"):
        assert f'data-chart="{name}"' in page
    for c in entry.checks:
        assert f'<tr data-check="{c.name}">' in page
    assert "<script" not in page  # the series page needs no script at all
    assert find_series(document, "no-such-series") is None
    assert 'rel="prev"' not in page and 'rel="next"' not in page


def test_neighbours_follow_the_worst_first_order(document) -> None:
    order = [s.id for s in series_order(document.series)]
    assert neighbours(document.series, order[0]) == (None, order[1])
    assert neighbours(document.series, order[3]) == (order[2], order[4])
    assert neighbours(document.series, order[-1]) == (order[-2], None)
    assert neighbours(document.series, "nope") == (None, None)
    entry = find_series(document, order[3])
    page = render_series(
        document,
        entry,
        (),
        report_href="/r",
        previous=(order[2], "/p"),
        following=(order[4], "/n"),
    )
    assert f'<a rel="prev" href="/p">worse: {order[2]}</a>' in page
    assert f'<a rel="next" href="/n">next: {order[4]} →</a>' in page
