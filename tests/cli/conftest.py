"""Helpers for the command-line and client tests."""

from __future__ import annotations

import json
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

import pytest
from cli_helpers import SMALL_BODY

from service.cli import main


@dataclass
class Run:
    code: int
    out: str
    err: str


@pytest.fixture
def cli(capsys: pytest.CaptureFixture[str]) -> Callable[..., Run]:
    """Run ``plumbline ARGS...`` in-process; returns exit code, stdout and stderr."""

    def run(*argv: str, http: Any = None) -> Run:
        capsys.readouterr()
        code = main(list(argv), http=http)
        captured = capsys.readouterr()
        return Run(code, captured.out, captured.err)

    return run


@pytest.fixture(autouse=True)
def _no_server_env(monkeypatch: pytest.MonkeyPatch) -> None:
    """Tests never pick up a server, token or database from the developer's environment."""
    for name in (
        "PLUMBLINE_SERVER",
        "PLUMBLINE_TOKEN",
        "PLUMBLINE_DATABASE_URL",
        "PLUMBLINE_ADMIN_TOKEN",
    ):
        monkeypatch.delenv(name, raising=False)


@pytest.fixture
def body_file(tmp_path):
    path = tmp_path / "request.json"
    path.write_text(json.dumps(SMALL_BODY))
    return path
