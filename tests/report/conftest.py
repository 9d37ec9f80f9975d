from __future__ import annotations

import pytest

from service.results import AssessmentDocument

from .fleet import assessment_of, invented_body
from .server import Server

LIVE_ADMIN = "live-server-admin-token-8c1f"
LIVE_SECRET = "live-server-link-secret-5e0b2a71"


@pytest.fixture(scope="session")
def body() -> dict:
    return invented_body(10)


@pytest.fixture(scope="session")
def assessment(body: dict) -> dict:
    return assessment_of(body)


@pytest.fixture(scope="session")
def document(assessment: dict) -> AssessmentDocument:
    return AssessmentDocument.from_dict(assessment)


@pytest.fixture(scope="session")
def live_server(tmp_path_factory: pytest.TempPathFactory):
    """The real service (``python -m service.api.server``) on a loopback port, SQLite."""
    work = tmp_path_factory.mktemp("server")
    env = {
        "PLUMBLINE_DATABASE_URL": f"sqlite:///{work / 'report.db'}",
        "PLUMBLINE_ADMIN_TOKEN": LIVE_ADMIN,
        "PLUMBLINE_LINK_SECRET": LIVE_SECRET,
    }
    with Server(work, env) as url:
        yield {"url": url, "auth": {"Authorization": f"Bearer {LIVE_ADMIN}"}, "secret": LIVE_SECRET}
