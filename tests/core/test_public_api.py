"""The core's public surface is kept on purpose, and the core stays free of web/database code."""

from __future__ import annotations

import subprocess
import sys
import types
from pathlib import Path

import service.core as core

ROOT = Path(__file__).resolve().parents[2]


def test_all_matches_the_public_names():
    public = {
        name
        for name, value in vars(core).items()
        if not name.startswith("_")
        and not isinstance(value, types.ModuleType)
        and name != "annotations"
    }
    assert sorted(core.__all__) == sorted(public)
    assert len(core.__all__) == len(set(core.__all__))
    for name in core.__all__:
        assert getattr(core, name) is not None


def test_all_is_sorted_for_review():
    assert list(core.__all__) == sorted(core.__all__, key=lambda s: (not s.isupper(), s))


def test_core_imports_no_framework_database_or_oracle():
    code = (
        "import sys, service.core, service.core.checks\n"
        "import numpy as np\n"
        "from service.core import make_batch, run_checks\n"
        "run_checks(make_batch(np.ones((2, 30)), np.zeros((2, 30))))\n"
        "banned = ('fastapi', 'starlette', 'sqlalchemy', 'pydantic', 'statsmodels', 'pandas',"
        " 'matplotlib', 'httpx')\n"
        "print(','.join(sorted(m for m in sys.modules if m.split('.')[0] in banned)))\n"
    )
    out = subprocess.run(
        [sys.executable, "-c", code], cwd=ROOT, capture_output=True, text=True, check=True
    )
    assert out.stdout.strip() == ""


def test_every_public_function_has_a_docstring():
    for name in core.__all__:
        value = getattr(core, name)
        if callable(value):
            assert (value.__doc__ or "").strip(), name
