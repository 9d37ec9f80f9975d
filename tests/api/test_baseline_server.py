"""A baseline over the real server process, on SQLite and PostgreSQL: the stored baseline is
found, compared and recorded; the comparison endpoint and the verdict read it back; a bad
baseline is a 422 naming the field. Invented fleets (tests/api/baseline_helpers.py)."""

from __future__ import annotations

import httpx
import pytest

from tests.serverproc import Server

from .baseline_helpers import fleet

TOKEN = "baseline-server-admin-token-77ab"
AUTH = {"Authorization": f"Bearer {TOKEN}"}


@pytest.mark.slow  # starts a server process
def test_a_baseline_over_the_real_server(database_url, tmp_path):
    with Server(database_url, tmp_path / "server.log", env={"PLUMBLINE_ADMIN_TOKEN": TOKEN}) as s:
        with httpx.Client(base_url=s.url, headers=AUTH, timeout=60) as http:
            first = http.post("/v1/assessments", json=fleet("2026.11"))
            assert first.status_code == 201, first.text
            bad = http.post("/v1/assessments", json=fleet("2026.12", baseline="2026.10"))
            assert bad.status_code == 422
            assert bad.json()["errors"][0]["loc"] == "baseline.version"
            worse = fleet("2026.12", extra_sd=3.0, version_seed=1, baseline="latest-pass")
            r = http.post("/v1/assessments", json=worse)
            assert r.status_code == 201, r.text
            doc = r.json()
            assert doc["verdict"] == "fail"
            assert doc["baseline"]["assessment_id"] == first.json()["id"]
            assert http.get(f"/v1/assessments/{doc['id']}").json() == doc
            verdict = http.get("/v1/models/crumb-counts/verdict").json()
            assert verdict["baseline"]["fleet"] == doc["fleet"]["baseline"]
            compared = http.get(
                "/v1/models/crumb-counts/compare", params={"a": "2026.11", "b": "2026.12"}
            )
            assert compared.status_code == 200, compared.text
            assert compared.json()["fleet"] == doc["fleet"]["baseline"]
            as_csv = http.get(
                "/v1/models/crumb-counts/compare",
                params={"a": "2026.11", "b": "2026.12"},
                headers={"Accept": "text/csv"},
            )
            assert as_csv.text.count("\n") == 31  # the header and 30 series
