"""The repository's own instructions: the README's Quickstart runs as CI runs it, and
``.gitignore`` ignores what the service writes into a working directory and no tracked file."""

from __future__ import annotations

import re
import shutil
import subprocess
from pathlib import Path

import pytest
from sqlalchemy import create_engine

from service.cli.parser import build_parser
from service.store.writelock import _lock_path

ROOT = Path(__file__).resolve().parents[1]
VENV_LINE = "python3 -m venv .venv && . .venv/bin/activate"


def _quickstart_blocks() -> list[list[str]]:
    text = (ROOT / "README.md").read_text()
    section = text.split("## Quickstart", 1)[1].split("\n## ", 1)[0]
    return [
        [line for line in block.strip().splitlines() if line.strip()]
        for block in re.findall(r"```\n(.*?)```", section, flags=re.S)
    ]


def test_quickstart_starts_with_the_virtual_environment() -> None:
    blocks = _quickstart_blocks()
    assert blocks[0][0] == VENV_LINE
    assert blocks[0][1] == "pip install . && plumbline demo && plumbline serve"
    assert blocks[1] == ["pip install '.[test]' && pytest"]


def test_ci_installs_and_tests_as_the_quickstart_says() -> None:
    ci = [
        line.strip()
        for line in (ROOT / ".ci" / "run").read_text().splitlines()
        if line.strip() and not line.lstrip().startswith("#")
    ]
    venv, activate = VENV_LINE.split(" && ")
    assert venv in ci
    assert activate in ci and ci.index(activate) > ci.index(venv)
    installs = [line for line in ci if " pip install " in f" {line} " and ".[test]" in line]
    assert installs == ["python -m pip install --quiet '.[test]'"]
    assert ci.index(installs[0]) > ci.index(activate)
    assert "python -m pytest" in ci


def _git(*args: str) -> subprocess.CompletedProcess[str]:
    return subprocess.run(["git", *args], cwd=ROOT, capture_output=True, text=True, check=False)


@pytest.fixture(scope="module")
def checkout() -> None:
    if shutil.which("git") is None or _git("rev-parse", "--git-dir").returncode != 0:
        pytest.skip("not a git checkout")


def test_gitignore_covers_what_the_demo_and_the_database_write(checkout: None) -> None:
    demo_dir = build_parser().parse_args(["demo"]).directory
    lock = _lock_path(create_engine("sqlite:///plumbline.db"))
    assert lock is not None
    written = [f"{demo_dir}/weekday.json", Path(lock).name, "plumbline.db"]
    result = _git("check-ignore", "--no-index", *written)
    assert sorted(result.stdout.split()) == sorted(written), result.stderr


def test_gitignore_matches_no_tracked_file(checkout: None) -> None:
    result = _git("ls-files", "--cached", "--ignored", "--exclude-standard")
    assert result.returncode == 0, result.stderr
    assert result.stdout.split() == []
