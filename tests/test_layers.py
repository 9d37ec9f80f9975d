"""Layer rules: which parts of ``service`` may import which.

Every module under ``service/`` is parsed with ``ast`` (nothing is imported), and every import in
it counts: top-level ones, those inside functions, methods and ``if TYPE_CHECKING:`` blocks, and
``importlib.import_module("...")`` / ``__import__("...")`` calls with a literal name. Relative
imports are resolved against the module's package. A rule fails on the first module it finds
importing a forbidden package and lists every offending line.
"""

from __future__ import annotations

import ast
from dataclasses import dataclass
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
PACKAGE = ROOT / "service"

# The command-line modules that run on the server's side (start the service, migrate or reach
# the database directly): they may import the store and the web app. Every other module under
# service/cli/ is the client command, which talks to the service over HTTP only. Entries are
# module names; a package entry covers its submodules.
SERVER_SIDE_CLI = ("service.cli.server",)


@dataclass(frozen=True)
class Import:
    module: str  # the importing module, e.g. "service.cli.tokens"
    target: str  # the absolute name imported, e.g. "service.store.repository"
    line: int

    def __str__(self) -> str:
        return f"{self.module}:{self.line} imports {self.target}"


def module_name(path: Path, root: Path = ROOT) -> str:
    parts = list(path.relative_to(root).with_suffix("").parts)
    if parts[-1] == "__init__":
        parts.pop()
    return ".".join(parts)


def _resolve(module: str, is_package: bool, level: int, name: str | None) -> str:
    """The absolute name of ``from <level dots><name> import ...`` inside ``module``."""
    if level == 0:
        return name or ""
    package = module.split(".") if is_package else module.split(".")[:-1]
    if level - 1 > len(package) - 1:
        raise ValueError(f"{module}: relative import beyond the top-level package")
    base = package[: len(package) - (level - 1)]
    return ".".join([*base, name] if name else base)


def imports_in(source: str, module: str, *, is_package: bool = False) -> list[Import]:
    """Every import in ``source`` (the text of ``module``), wherever it stands.

    ``from X import a`` yields ``X`` and ``X.a`` (``a`` may be a submodule)."""
    found: list[Import] = []
    for node in ast.walk(ast.parse(source)):
        if isinstance(node, ast.Import):
            found += [Import(module, alias.name, node.lineno) for alias in node.names]
        elif isinstance(node, ast.ImportFrom):
            base = _resolve(module, is_package, node.level, node.module)
            found.append(Import(module, base, node.lineno))
            found += [
                Import(module, f"{base}.{alias.name}", node.lineno)
                for alias in node.names
                if alias.name != "*"
            ]
        elif isinstance(node, ast.Call) and _is_dynamic_import(node.func):
            arg = node.args[0] if node.args else None
            if isinstance(arg, ast.Constant) and isinstance(arg.value, str):
                target = arg.value
                if target.startswith(".") and len(node.args) > 1:
                    package = node.args[1]
                    if isinstance(package, ast.Constant) and isinstance(package.value, str):
                        level = len(target) - len(target.lstrip("."))
                        target = _resolve(package.value, True, level, target.lstrip(".") or None)
                found.append(Import(module, target, node.lineno))
    return found


def _is_dynamic_import(func: ast.expr) -> bool:
    if isinstance(func, ast.Name):
        return func.id in {"__import__", "import_module"}
    return isinstance(func, ast.Attribute) and func.attr == "import_module"


def all_imports() -> list[Import]:
    found: list[Import] = []
    for path in sorted(PACKAGE.rglob("*.py")):
        found += imports_in(
            path.read_text(encoding="utf-8"),
            module_name(path),
            is_package=path.name == "__init__.py",
        )
    return found


def within(name: str, prefixes: tuple[str, ...]) -> bool:
    return any(name == p or name.startswith(p + ".") for p in prefixes)


@dataclass(frozen=True)
class Rule:
    name: str
    importers: tuple[str, ...]  # the modules the rule is about (packages cover submodules)
    forbidden: tuple[str, ...]
    exempt: tuple[str, ...] = ()

    def applies_to(self, module: str) -> bool:
        return within(module, self.importers) and not within(module, self.exempt)

    def violations(self, imports: list[Import]) -> list[Import]:
        return [
            i for i in imports if self.applies_to(i.module) and within(i.target, self.forbidden)
        ]


CORE = Rule(
    "core imports no web, database, pydantic, ingest, report, client or CLI code",
    ("service.core",),
    (
        "service.api",
        "service.store",
        "service.ingest",
        "service.cli",
        "service.report",
        "service.client",
        "service.settings",
        "pydantic",
        "pydantic_settings",
        "fastapi",
        "starlette",
        "sqlalchemy",
        "alembic",
        "uvicorn",
        "httpx",
    ),
)
STORE = Rule("the store does not import the web layer", ("service.store",), ("service.api",))
INGEST = Rule(
    "ingest imports neither the web layer nor the store",
    ("service.ingest",),
    ("service.api", "service.store"),
)
CLIENT_CLI = Rule(
    "the client command reaches the service over HTTP only (no store, no web app)",
    ("service.cli",),
    ("service.store", "service.api"),
    exempt=SERVER_SIDE_CLI,
)
NO_ORACLE = Rule(
    "the product never imports statsmodels (a test dependency only)",
    ("service",),
    ("statsmodels",),
)

RULES = [
    CORE,
    STORE,
    INGEST,
    pytest.param(CLIENT_CLI, id="client-cli"),
    NO_ORACLE,
]


@pytest.fixture(scope="module")
def imports() -> list[Import]:
    return all_imports()


@pytest.mark.parametrize("rule", RULES, ids=lambda r: getattr(r, "importers", ("?",))[0])
def test_layer_rule(rule: Rule, imports: list[Import]) -> None:
    # Not vacuous: the rule is about modules that exist and import something.
    assert any(rule.applies_to(i.module) for i in imports), rule.name
    bad = rule.violations(imports)
    assert not bad, rule.name + ":\n  " + "\n  ".join(map(str, bad))


def test_every_module_is_read(imports: list[Import]) -> None:
    modules = {i.module for i in imports}
    for path in PACKAGE.rglob("*.py"):
        if path.stat().st_size and "import" in path.read_text(encoding="utf-8"):
            assert module_name(path) in modules, path
    # Known edges are seen, relative and function-level ones included.
    targets = {(i.module, i.target) for i in imports}
    # `from ...api.server import run` inside a function of a package module:
    assert ("service.cli.server.admin", "service.api.server") in targets
    assert ("service.api.assessing", "service.core.gate") in targets


# --- The checker itself ----------------------------------------------------------------------

SYNTHETIC = '''
"""An invented core module that breaks the rule only inside functions."""
from __future__ import annotations

from typing import TYPE_CHECKING

import numpy as np

from .batch import make_batch

if TYPE_CHECKING:
    from service.api.schemas import Thing


def save(x):
    from ..store import repository

    return repository.save(x)


def fetch():
    import importlib

    return importlib.import_module("service.ingest.json_body")


class Handler:
    def run(self):
        from .. import cli
        import fastapi.responses
'''


def test_checker_catches_function_level_and_hidden_imports() -> None:
    found = imports_in(SYNTHETIC, "service.core.invented")
    bad = {(i.target, i.line) for i in CORE.violations(found)}
    lines = SYNTHETIC.splitlines()

    def line_of(text: str) -> int:
        return next(n for n, line in enumerate(lines, 1) if text in line)

    assert ("service.store", line_of("from ..store")) in bad  # function-level, relative
    assert ("service.store.repository", line_of("from ..store")) in bad
    assert ("service.api.schemas", line_of("service.api.schemas")) in bad  # TYPE_CHECKING
    assert ("service.ingest.json_body", line_of("import_module(")) in bad  # dynamic
    assert ("service.cli", line_of("from .. import cli")) in bad  # method-level
    assert ("fastapi.responses", line_of("import fastapi")) in bad
    # Allowed imports are not reported.
    assert all(not t.startswith(("numpy", "typing", "service.core")) for t, _ in bad)
    assert ("service.core.batch", line_of("from .batch")) in {(i.target, i.line) for i in found}


def test_relative_imports_resolve_against_the_package() -> None:
    assert _resolve("service.cli.tokens", False, 2, "store") == "service.store"
    assert _resolve("service.cli", True, 1, "errors") == "service.cli.errors"
    assert _resolve("service.cli", True, 2, None) == "service"
    assert _resolve("service.api.routers.reports", False, 3, "report") == "service.report"
    with pytest.raises(ValueError):
        _resolve("service.links", False, 3, "x")


def test_exempt_server_side_modules_and_packages() -> None:
    src = "def f():\n    from service.store import repository\n"
    for module in ("service.cli.server", "service.cli.server.admin", "service.cli.server.tokens"):
        assert CLIENT_CLI.violations(imports_in(src, module)) == [], module
    for module in ("service.cli.tokens", "service.cli.admin", "service.cli.serverless"):
        assert CLIENT_CLI.violations(imports_in(src, module)), module
