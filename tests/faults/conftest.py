"""Fixtures for the fault tests: databases of their own on each backend."""

from __future__ import annotations

import uuid
from collections.abc import Iterator

import pytest

from tests.postgres import postgres_url, require_postgres

ADMIN_TOKEN = "plb_faults-admin-5d6e7f8091a2b3c4"
ADMIN = {"Authorization": f"Bearer {ADMIN_TOKEN}"}


@pytest.fixture
def postgres_database() -> Iterator[str]:
    """A URL for a database of its own, created for the test and dropped after it."""
    from sqlalchemy import create_engine, text
    from sqlalchemy.engine import make_url

    require_postgres()
    name = "plumbline_faults_" + uuid.uuid4().hex[:12]
    admin = create_engine(postgres_url(), isolation_level="AUTOCOMMIT")
    with admin.connect() as conn:
        conn.execute(text(f'CREATE DATABASE "{name}"'))
    try:
        yield make_url(postgres_url()).set(database=name).render_as_string(hide_password=False)
    finally:
        with admin.connect() as conn:
            conn.execute(text(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)'))
        admin.dispose()


@pytest.fixture(params=["sqlite", "postgresql"])
def any_database(request, tmp_path) -> str:
    if request.param == "sqlite":
        return f"sqlite:///{tmp_path / 'faults.db'}"
    return request.getfixturevalue("postgres_database")


def series_body(model: str, n_series: int, seed: int, n: int = 104) -> dict:
    """An invented assessment: ``n_series`` series of ``n`` weeks, fitted values off by noise."""
    import numpy as np

    rng = np.random.default_rng(seed)
    weeks = np.arange(n)
    out = []
    for i in range(n_series):
        fitted = 40.0 + 8.0 * np.sin(2 * np.pi * weeks / 52) + i
        actual = fitted + rng.normal(0.0, 1.5, n)
        out.append(
            {
                "id": f"dock-{i}",
                "actuals": [round(float(v), 3) for v in actual],
                "fitted": [round(float(v), 3) for v in fitted],
            }
        )
    return {"model": model, "version": "1", "labels": {"n_series": str(n_series)}, "series": out}
