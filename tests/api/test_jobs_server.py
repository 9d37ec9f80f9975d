"""Background jobs over the real server process, on both backends: a job polled to its end,
a job that outlives a SIGKILL of its server (queued, and on PostgreSQL running), and two server
processes sharing one PostgreSQL queue without running a job twice.

Polling loops have a generous deadline, as a guard against a hang only.
"""

from __future__ import annotations

import signal
import time
from typing import Any

import httpx
import pytest
from sqlalchemy import create_engine, text

from tests.serverproc import Server

from .helpers import white_noise_series

TOKEN = "jobs-server-test-token-0123456789"
AUTH = {"Authorization": f"Bearer {TOKEN}"}
ASYNC = {**AUTH, "Prefer": "respond-async"}
HANG_GUARD_SECONDS = 180.0


def fleet(n: int, model: str = "looms") -> dict[str, Any]:
    return {
        "model": model,
        "version": "2",
        "series": [white_noise_series(f"{model}-{i}", seed=i, holdout=6) for i in range(n)],
    }


def server(database_url: str, tmp_path, name: str = "server", **env: str) -> Server:
    return Server(
        database_url,
        tmp_path / f"{name}.log",
        env={
            "PLUMBLINE_ADMIN_TOKEN": TOKEN,
            **{f"PLUMBLINE_{k.upper()}": v for k, v in env.items()},
        },
    )


def wait_until(url: str, states: tuple[str, ...]) -> dict[str, Any]:
    deadline = time.monotonic() + HANG_GUARD_SECONDS
    while True:
        job = httpx.get(url, headers=AUTH, timeout=30).json()
        if job["state"] in states:
            return job
        assert time.monotonic() < deadline, f"job still {job['state']}"
        time.sleep(0.05)


def without_envelope(doc: dict[str, Any]) -> dict[str, Any]:
    return {k: v for k, v in doc.items() if k not in ("id", "created_at")}


def same_as_sync(base: str, job: dict[str, Any], body: dict[str, Any]) -> None:
    stored = httpx.get(base + job["assessment"]["href"], headers=AUTH, timeout=30).json()
    sync = httpx.post(f"{base}/v1/assessments", json=body, headers=AUTH, timeout=60)
    assert sync.status_code == 201
    assert without_envelope(stored) == without_envelope(sync.json())


@pytest.mark.slow
def test_a_job_over_the_real_server(database_url, tmp_path):
    body = fleet(40)
    with server(database_url, tmp_path) as s:
        r = httpx.post(f"{s.url}/v1/assessments", json=body, headers=ASYNC, timeout=60)
        assert r.status_code == 202, r.text
        assert r.headers["preference-applied"] == "respond-async"
        job = wait_until(s.url + r.headers["location"], ("done", "failed"))
        assert job["state"] == "done" and job["attempts"] == 1
        assert job["progress"] == {"series_done": 40, "series_total": 40}
        same_as_sync(s.url, job, body)


@pytest.mark.slow
def test_a_queued_job_outlives_a_kill_of_its_server(database_url, tmp_path):
    body = fleet(12)
    s = server(database_url, tmp_path, job_workers="0")  # queues, runs nothing
    s.start()
    try:
        r = httpx.post(f"{s.url}/v1/assessments", json=body, headers=ASYNC, timeout=60)
        assert r.status_code == 202
        where = s.url + r.headers["location"]
        assert httpx.get(where, headers=AUTH, timeout=30).json()["state"] == "queued"
    finally:
        s.kill(signal.SIGKILL)
    s.env["PLUMBLINE_JOB_WORKERS"] = "1"
    s.start()
    try:
        job = wait_until(where, ("done", "failed"))
        assert job["state"] == "done" and job["attempts"] == 1
        same_as_sync(s.url, job, body)
    finally:
        s.kill()


@pytest.mark.slow
def test_a_running_job_outlives_a_kill_of_its_server(database_url, tmp_path):
    """The test holds a lock on the assessments table, so the server's worker takes the job and
    computes it but cannot store it: the job is running when the server is killed. Started
    again (the lock released), the server takes the job up once its lease has expired."""
    if not database_url.startswith("postgresql"):
        pytest.skip("the table lock that holds the job in its run is PostgreSQL's")
    body = fleet(12)
    s = server(database_url, tmp_path, job_lease_seconds="2")
    s.start()
    engine = create_engine(database_url)
    try:
        with engine.connect() as holder:
            holder.execute(text("LOCK TABLE assessments IN EXCLUSIVE MODE"))
            r = httpx.post(f"{s.url}/v1/assessments", json=body, headers=ASYNC, timeout=60)
            assert r.status_code == 202
            where = s.url + r.headers["location"]
            running = wait_until(where, ("running", "done", "failed"))
            assert running["state"] == "running" and running["attempts"] == 1
            s.kill(signal.SIGKILL)
            holder.rollback()
        s.start()
        job = wait_until(where, ("done", "failed"))
        assert job["state"] == "done" and job["attempts"] == 2
        same_as_sync(s.url, job, body)
        with engine.connect() as conn:
            stored = conn.execute(text("SELECT count(*) FROM assessments")).scalar_one()
        assert stored == 2  # the job's one and the comparison's: nothing stored twice
    finally:
        s.kill()
        engine.dispose()


@pytest.mark.slow
def test_two_server_processes_share_one_queue_and_run_each_job_once(database_url, tmp_path):
    if not database_url.startswith("postgresql"):
        pytest.skip("several processes take jobs from one PostgreSQL database")
    a = server(database_url, tmp_path, "a", job_workers="2")
    b = server(database_url, tmp_path, "b", job_workers="2")
    a.start()
    b.start()
    engine = create_engine(database_url)
    try:
        where = []
        for i in range(24):
            target = a if i % 2 == 0 else b
            r = httpx.post(
                f"{target.url}/v1/assessments",
                json=fleet(3, model=f"loom{i}"),
                headers=ASYNC,
                timeout=60,
            )
            assert r.status_code == 202
            where.append(target.url + r.headers["location"])
        done = [wait_until(url, ("done", "failed")) for url in where]
        assert all(j["state"] == "done" and j["attempts"] == 1 for j in done)
        with engine.connect() as conn:
            rows = conn.execute(text("SELECT worker, attempts, assessment_id FROM jobs")).all()
            stored = conn.execute(text("SELECT id FROM assessments")).scalars().all()
        assert len(rows) == 24 and all(r.attempts == 1 for r in rows)
        assert sorted(stored) == sorted(r.assessment_id for r in rows)  # one each, none twice
        assert all(r.worker for r in rows)
    finally:
        a.kill()
        b.kill()
        engine.dispose()


@pytest.mark.slow
def test_a_worker_process_without_http_runs_the_jobs(database_url, tmp_path):
    """``plumbline work`` beside a server that only queues (``job_workers=0``)."""
    from tests.serverproc import start_python, stop

    body = fleet(8)
    s = server(database_url, tmp_path, job_workers="0")
    s.start()
    log = tmp_path / "worker.log"
    worker = start_python(
        ["-m", "service.cli", "work", "--threads", "2"],
        {"PLUMBLINE_DATABASE_URL": database_url},
        log,
    )
    try:
        r = httpx.post(f"{s.url}/v1/assessments", json=body, headers=ASYNC, timeout=60)
        assert r.status_code == 202
        job = wait_until(s.url + r.headers["location"], ("done", "failed"))
        assert job["state"] == "done"
        same_as_sync(s.url, job, body)
        engine = create_engine(database_url)
        try:
            with engine.connect() as conn:
                ran_by = conn.execute(
                    text("SELECT worker FROM jobs WHERE id = :id"), {"id": job["id"]}
                ).scalar_one()
        finally:
            engine.dispose()
        assert ran_by.endswith(f":{worker.pid}")
    finally:
        stop(worker, signal.SIGTERM)
        s.kill()
    assert worker.returncode == 0, log.read_text()
    assert "stopped" in log.read_text()
