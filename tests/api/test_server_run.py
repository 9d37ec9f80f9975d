"""``service.api.server.run`` prepares the database once and leaves the environment alone; each
worker's app has the environment's settings with the start-up work left out."""

from __future__ import annotations

import os

import uvicorn

from service.api import server
from service.settings import Settings


def test_run_migrates_once_and_does_not_touch_the_environment(monkeypatch, tmp_path):
    url = f"sqlite:///{tmp_path / 'run.db'}"
    monkeypatch.setenv("PLUMBLINE_DATABASE_URL", url)
    monkeypatch.setenv("PLUMBLINE_ADMIN_TOKEN", "t" * 32)
    calls: list[tuple[tuple, dict]] = []
    monkeypatch.setattr(uvicorn, "run", lambda *a, **kw: calls.append((a, kw)))
    before = dict(os.environ)
    server.run(host="127.0.0.1", port=1, workers=3)
    assert dict(os.environ) == before
    ((args, options),) = calls
    assert args == ("service.api.server:worker_app",)
    assert options["factory"] is True and options["workers"] == 3
    assert (tmp_path / "run.db").exists()  # migrated before the workers start


def test_a_worker_app_has_the_environment_settings_without_start_up(monkeypatch, tmp_path):
    url = f"sqlite:///{tmp_path / 'worker.db'}"
    monkeypatch.setenv("PLUMBLINE_DATABASE_URL", url)
    monkeypatch.setenv("PLUMBLINE_MAX_SERIES", "12")
    app = server.worker_app()
    try:
        settings = app.state.settings
        assert settings.migrate_on_start is False
        assert settings.model_dump(exclude={"migrate_on_start"}) == Settings().model_dump(
            exclude={"migrate_on_start"}
        )
        assert settings.max_series == 12 and settings.database_url == url
    finally:
        app.state.store.close()
