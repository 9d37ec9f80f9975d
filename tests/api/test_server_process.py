"""The real server process: first start prints an admin token, an assessment survives SIGKILL."""

from __future__ import annotations

import re
import signal

import httpx
import pytest

from tests.serverproc import Server

from .helpers import white_noise_series


@pytest.mark.slow
def test_assessment_survives_sigkill_and_restart(database_url, tmp_path):
    log = tmp_path / "server.log"
    server = Server(database_url, log).start()
    try:
        printed = re.findall(r"plb_[A-Za-z0-9_-]{20,}", log.read_text())
        assert len(printed) == 1, log.read_text()
        auth = {"Authorization": f"Bearer {printed[0]}"}
        body = {
            "model": "rye",
            "version": "3",
            "series": [white_noise_series(f"shop-{i}", seed=i) for i in range(3)],
        }
        r = httpx.post(f"{server.url}/v1/assessments", json=body, headers=auth, timeout=30)
        assert r.status_code == 201, r.text
        posted = r.json()
    finally:
        server.kill(signal.SIGKILL)
    assert server.proc.returncode == -signal.SIGKILL

    server.start()  # the same port, the same database
    try:
        # No second token on a restart: one exists already.
        assert len(re.findall(r"plb_[A-Za-z0-9_-]{20,}", log.read_text())) == 1
        r = httpx.get(f"{server.url}/v1/assessments/{posted['id']}", headers=auth, timeout=30)
        assert r.status_code == 200
        assert r.json() == posted
        verdict = httpx.get(f"{server.url}/v1/models/rye/verdict", headers=auth, timeout=30).json()
        assert verdict["assessment_id"] == posted["id"]
    finally:
        server.kill(signal.SIGTERM)
