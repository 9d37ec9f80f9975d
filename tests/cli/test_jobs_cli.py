"""``plumbline assess`` and the client with background jobs, against the service in-process.

The app runs no job threads (``job_workers=0``): each pause the client makes between two looks
at its job runs the queue once instead, so the test sees every step in order, with no clock.
Request bodies come from the invented demo scenario.
"""

from __future__ import annotations

import httpx
import pytest
from cli_helpers import AppTransport

from service import demo
from service.api.jobs import JobRunner
from service.cli.progress import bar
from service.client import JobFailed, PlumblineClient
from service.store import make_store

URL = "http://testserver"
ADMIN = "admin-secret-for-tests"
AUTH = {"Authorization": f"Bearer {ADMIN}"}


@pytest.fixture
def db_url(tmp_path):
    return f"sqlite:///{tmp_path / 'plumbline.db'}"


@pytest.fixture
def app(db_url):
    from service.api.app import create_app
    from service.settings import Settings

    return create_app(Settings(database_url=db_url, admin_token=ADMIN, job_workers=0))


@pytest.fixture
def http(app):
    transport = AppTransport(app)
    with httpx.Client(transport=transport, base_url=URL) as client:
        yield client
    transport.close()


@pytest.fixture
def pauses(monkeypatch, app):
    """Every ``time.sleep`` runs the app's queue once; the pauses are counted."""
    seen: list[float] = []
    runner: JobRunner = app.state.services.jobs

    def pause(seconds: float) -> None:
        seen.append(seconds)
        runner.run_once()

    monkeypatch.setattr("time.sleep", pause)
    return seen


@pytest.fixture
def files(tmp_path):
    directory = tmp_path / "demo"
    demo.write_demo(str(directory))
    return directory


def jobs_made(db_url: str) -> int:
    from sqlalchemy import text

    store = make_store(db_url)
    try:
        with store.engine.connect() as conn:
            return int(conn.execute(text("SELECT count(*) FROM jobs")).scalar_one())
    finally:
        store.close()


@pytest.mark.parametrize(("file", "code"), [("weekday.json", 0), ("stale.json", 1)])
def test_assess_as_a_job_waits_and_exits_with_the_verdicts_code(
    cli, http, files, pauses, db_url, file, code
):
    sync = cli("assess", str(files / file), "--server", URL, "--token", ADMIN, "--json", http=http)
    queued = cli(
        "assess", str(files / file), "--server", URL, "--token", ADMIN, "--as-job", "--json",
        http=http,
    )  # fmt: skip
    assert sync.code == queued.code == code, queued.err
    assert pauses  # it waited for the job
    assert jobs_made(db_url) == 1
    import json

    a, b = json.loads(sync.out), json.loads(queued.out)
    assert a["id"] != b["id"]
    for doc in (a, b):
        doc.pop("id"), doc.pop("created_at")
    assert a == b


def test_large_files_go_as_jobs_by_themselves(cli, http, files, pauses, db_url):
    path = files / "weekday.json"
    small = cli("assess", str(path), "--server", URL, "--token", ADMIN, http=http)
    assert small.code == 0 and jobs_made(db_url) == 0  # under the 8 MiB default
    above = path.stat().st_size / 2 / 1024 / 1024  # MiB: half the file
    big = cli(
        "assess", str(path), "--server", URL, "--token", ADMIN, "--job-above", f"{above:.6f}",
        http=http,
    )  # fmt: skip
    assert big.code == 0 and jobs_made(db_url) == 1
    forced = cli(
        "assess", str(path), "--server", URL, "--token", ADMIN, "--job-above", f"{above:.6f}",
        "--no-job", http=http,
    )  # fmt: skip
    assert forced.code == 0 and jobs_made(db_url) == 1


def test_a_failed_job_exits_as_a_server_error(cli, http, files, monkeypatch, app, db_url):
    def broken(_job, _progress):
        raise MemoryError("invented: the worker ran out of memory")

    store = make_store(db_url)
    failing = JobRunner(store, app.state.settings, work=broken)
    monkeypatch.setattr("time.sleep", lambda seconds: failing.run_once())
    try:
        run = cli(
            "assess", str(files / "weekday.json"), "--server", URL, "--token", ADMIN, "--as-job",
            http=http,
        )  # fmt: skip
    finally:
        store.close()
    assert run.code == 3
    assert "failed on the server" in run.err and "internal error" in run.err


def test_client_reports_progress_of_each_look(http, files, pauses):
    body = demo_body(files)
    states = []
    with PlumblineClient(URL, token=ADMIN, http=http) as client:
        doc = client.assess(body, as_job=True, on_progress=states.append)
    # The 202 answer, the first look (before any pause), the look after the queue ran.
    assert [s.state for s in states] == ["queued", "queued", "done"]
    assert states[-1].series_done == states[-1].series_total == len(body["series"])
    assert doc.id == states[-1].assessment_id


def test_client_wait_gives_up_after_its_timeout(http, files, monkeypatch):
    monkeypatch.setattr("time.sleep", lambda seconds: None)  # the queue never runs
    clock = iter(range(0, 10_000, 10))
    monkeypatch.setattr("time.monotonic", lambda: float(next(clock)))
    with PlumblineClient(URL, token=ADMIN, http=http) as client:
        with pytest.raises(TimeoutError, match="still queued"):
            client.assess(demo_body(files), as_job=True, wait_seconds=25)


def test_job_failed_carries_the_problem():
    exc = JobFailed("j1", {"status": 500, "detail": "internal error", "type": "urn:x"})
    assert exc.status == 500 and exc.problem["type"] == "urn:x" and "j1" in str(exc)


def test_progress_bar():
    assert bar(0, 4000) == "[........................] 0/4,000"
    assert bar(1000, 4000) == "[######..................] 1,000/4,000"
    assert bar(4000, 4000) == "[########################] 4,000/4,000"
    assert bar(0, 0) == "[........................] 0/0"


def demo_body(files):
    import json

    return json.loads((files / "weekday.json").read_text())


def test_work_refuses_a_database_not_migrated(cli, tmp_path):
    run = cli("work", "--database", f"sqlite:///{tmp_path / 'empty.db'}")
    assert run.code == 2
    assert "run plumbline db upgrade" in run.err
