from __future__ import annotations

import pytest

from .fleet import assessment_of, invented_body


@pytest.fixture(scope="session")
def body() -> dict:
    return invented_body(10)


@pytest.fixture(scope="session")
def assessment(body: dict) -> dict:
    return assessment_of(body)
