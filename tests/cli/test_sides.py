"""The command's client side imports neither the store nor the API, not even inside a function;
``--help`` and the HTTP client commands never load the server side."""

from __future__ import annotations

import ast
import json
import os
import subprocess
import sys
from pathlib import Path

import pytest
from cli_helpers import SMALL_BODY, closed_port

ROOT = Path(__file__).resolve().parents[2]
SERVICE = ROOT / "service"
CLIENT_MODULES = sorted(
    [p for p in (SERVICE / "cli").glob("*.py")] + [SERVICE / "client.py", SERVICE / "demo.py"]
)
SERVER_SIDE = ("service.store", "service.api", "service.settings", "service.cli.server")


def imported(path: Path) -> set[str]:
    """Every module ``path`` imports, at any depth of its code, relative imports resolved."""
    package = ".".join(path.relative_to(ROOT).parts[:-1])  # what a relative import starts at
    names: set[str] = set()
    for node in ast.walk(ast.parse(path.read_text())):
        if isinstance(node, ast.Import):
            names.update(alias.name for alias in node.names)
        elif isinstance(node, ast.ImportFrom):
            base = package.split(".")
            base = base[: len(base) - node.level + 1] if node.level else []
            module = ".".join([*base, *([node.module] if node.module else [])])
            names.add(module)
            names.update(f"{module}.{alias.name}" for alias in node.names)
    return names


def on_server_side(name: str) -> bool:
    return any(name == s or name.startswith(s + ".") for s in SERVER_SIDE)


def test_the_resolver_sees_relative_and_function_level_imports():
    found = imported(SERVICE / "cli" / "server" / "tokens.py")
    assert {"service.client", "service.cli.tokens.run_with", "service.store.engine"} <= found


@pytest.mark.parametrize("path", CLIENT_MODULES, ids=lambda p: p.name)
def test_a_client_module_imports_nothing_of_the_server_side(path):
    found = {name for name in imported(path) if on_server_side(name)}
    if path == SERVICE / "cli" / "__init__.py":
        # The entry point hands the database commands to the server side, and nothing else.
        assert found == {"service.cli.server", "service.cli.server.run"}
    else:
        assert found == set()


PROBE = """
import sys
from service.cli import main
code = main(sys.argv[1:])
loaded = sorted(m for m in sys.modules
                if m.split(".")[0] in ("sqlalchemy", "fastapi", "starlette", "uvicorn")
                or m.startswith(("service.store", "service.api", "service.settings",
                                 "service.cli.server")))
print("LOADED=" + ",".join(loaded), file=sys.stderr)
sys.exit(code)
"""


def probe(*argv: str) -> tuple[int, str]:
    proc = subprocess.run(
        [sys.executable, "-c", PROBE, *argv],
        capture_output=True,
        text=True,
        timeout=120,
        cwd=ROOT,
        env={k: v for k, v in os.environ.items() if not k.startswith("PLUMBLINE_")},
    )
    loaded = [line for line in proc.stderr.splitlines() if line.startswith("LOADED=")]
    return proc.returncode, loaded[-1]


def test_client_commands_load_nothing_of_the_server_side(tmp_path):
    server = f"http://127.0.0.1:{closed_port()}"
    body = tmp_path / "req.json"
    body.write_text(json.dumps(SMALL_BODY))
    assert probe("--help") == (0, "LOADED=")
    assert probe("tokens", "list", "--server", server, "--retries", "0") == (3, "LOADED=")
    assert probe("verdict", "m", "--server", server, "--retries", "0") == (3, "LOADED=")
    assert probe("assess", str(body), "--offline")[1] == "LOADED="  # the core and ingest only


def test_database_commands_are_run_by_the_server_side(tmp_path):
    code, loaded = probe("tokens", "list", "--database", f"sqlite:///{tmp_path / 'none.db'}")
    assert code == 2 and "service.cli.server.tokens" in loaded.split(",")
