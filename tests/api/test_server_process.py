"""The real server process: first start prints an admin token, an assessment survives SIGKILL."""

from __future__ import annotations

import os
import re
import signal
import socket
import subprocess
import sys
import time
from pathlib import Path

import httpx
import pytest

from .helpers import white_noise_series

ROOT = Path(__file__).resolve().parents[2]


def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def start(database_url: str, port: int, log: Path) -> subprocess.Popen:
    env = {k: v for k, v in os.environ.items() if not k.startswith("PLUMBLINE_")}
    env.update({"PLUMBLINE_DATABASE_URL": database_url, "PYTHONPATH": str(ROOT),
                "PYTHONUNBUFFERED": "1"})
    code = f"from service.api.server import run; run(host='127.0.0.1', port={port}, workers=1)"
    with log.open("ab") as out:
        return subprocess.Popen([sys.executable, "-c", code], cwd=ROOT, env=env, stdout=out,
                                stderr=subprocess.STDOUT, start_new_session=True)


def wait_ready(port: int, proc: subprocess.Popen, timeout: float = 60.0) -> None:
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        if proc.poll() is not None:
            raise AssertionError(f"server exited with {proc.returncode}")
        try:
            if httpx.get(f"http://127.0.0.1:{port}/readyz", timeout=1.0).status_code == 200:
                return
        except httpx.HTTPError:
            pass
        time.sleep(0.1)
    raise AssertionError("server did not become ready")


def stop(proc: subprocess.Popen, sig: int) -> None:
    if proc.poll() is None:
        os.killpg(proc.pid, sig)
        proc.wait(timeout=30)


@pytest.mark.slow
def test_assessment_survives_sigkill_and_restart(database_url, tmp_path):
    port = free_port()
    log = tmp_path / "server.log"
    proc = start(database_url, port, log)
    try:
        wait_ready(port, proc)
        printed = re.findall(r"plb_[A-Za-z0-9_-]{20,}", log.read_text())
        assert len(printed) == 1, log.read_text()
        auth = {"Authorization": f"Bearer {printed[0]}"}
        body = {"model": "rye", "version": "3",
                "series": [white_noise_series(f"shop-{i}", seed=i) for i in range(3)]}
        r = httpx.post(f"http://127.0.0.1:{port}/v1/assessments", json=body, headers=auth,
                       timeout=30)
        assert r.status_code == 201, r.text
        posted = r.json()
    finally:
        stop(proc, signal.SIGKILL)
    assert proc.returncode == -signal.SIGKILL

    proc = start(database_url, port, log)
    try:
        wait_ready(port, proc)
        # No second token on a restart: one exists already.
        assert len(re.findall(r"plb_[A-Za-z0-9_-]{20,}", log.read_text())) == 1
        r = httpx.get(f"http://127.0.0.1:{port}/v1/assessments/{posted['id']}", headers=auth,
                      timeout=30)
        assert r.status_code == 200
        assert r.json() == posted
        verdict = httpx.get(f"http://127.0.0.1:{port}/v1/models/rye/verdict", headers=auth,
                            timeout=30).json()
        assert verdict["assessment_id"] == posted["id"]
    finally:
        stop(proc, signal.SIGTERM)
