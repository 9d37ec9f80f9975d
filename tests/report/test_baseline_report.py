"""The report of an assessment compared with a baseline: the fleet page's section (what was
compared, the figures side by side, the SVG of relative error against weight) and the
baseline's forecasts on a series' holdout chart. In-process on SQLite (the store reads are
tested on both backends in tests/api/test_baseline.py); invented fleets."""

from __future__ import annotations

import re
from xml.etree import ElementTree

import pytest
from fastapi.testclient import TestClient

from service.api.app import create_app
from service.settings import Settings
from tests.api.baseline_helpers import fleet

ADMIN = "report-baseline-admin-token-51c2"
AUTH = {"Authorization": f"Bearer {ADMIN}"}


@pytest.fixture
def client(tmp_path):
    url = f"sqlite:///{tmp_path / 'r.db'}"
    with TestClient(create_app(Settings(database_url=url, admin_token=ADMIN))) as c:
        yield c


def posted(client, body) -> dict:
    r = client.post("/v1/assessments", json=body, headers=AUTH)
    assert r.status_code == 201, r.text
    return r.json()


def test_the_fleet_report_has_a_baseline_section_with_its_chart(client):
    posted(client, fleet("2026.11"))
    doc = posted(client, fleet("2026.12", extra_sd=3.0, version_seed=1, baseline="2026.11"))
    page = client.get(f"/v1/assessments/{doc['id']}/report", headers=AUTH)
    assert page.status_code == 200
    html = page.text
    section = html[html.index('id="baseline-section"') :]
    section = section[: section.index("</section>")]
    assert "version 2026.11" in section and doc["baseline"]["assessment_id"] in section
    assert "30 series, 360 holdout periods" in section
    svg = re.search(r"<svg[^>]*id=\"baseline-chart\".*?</svg>", section, re.S).group(0)
    root = ElementTree.fromstring(svg)  # well-formed SVG
    dots = root.findall("{http://www.w3.org/2000/svg}circle")
    assert len(dots) == 30
    # One dot per series, in the series' own status.
    statuses = {
        s["id"]: next(c["status"] for c in s["checks"] if c["name"] == "baseline_accuracy")
        for s in doc["series"]
    }
    assert {d.get("data-series"): d.get("data-status") for d in dots} == statuses


def test_without_a_baseline_there_is_no_section(client):
    doc = posted(client, fleet("2026.11"))
    html = client.get(f"/v1/assessments/{doc['id']}/report", headers=AUTH).text
    assert 'id="baseline-section"' not in html


def test_the_series_page_draws_both_versions_holdout_paths(client):
    posted(client, fleet("2026.11"))
    doc = posted(client, fleet("2026.12", extra_sd=3.0, version_seed=1, baseline="2026.11"))
    page = client.get(f"/v1/assessments/{doc['id']}/report/series/dock-03", headers=AUTH)
    assert page.status_code == 200
    chart = page.text[page.text.index('id="chart-holdout"') :]
    chart = chart[: chart.index("</figure>")]
    assert "baseline forecast: version 2026.11" in chart
    assert "dash-dot: the baseline version" in chart  # the caption says what the line is
    plain = posted(client, fleet("2026.13", extra_sd=3.0, version_seed=2))
    other = client.get(f"/v1/assessments/{plain['id']}/report/series/dock-03", headers=AUTH)
    assert "baseline forecast" not in other.text
