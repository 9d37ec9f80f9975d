"""The store's reads behind a baseline, on SQLite and PostgreSQL: the newest version whose
latest verdict passed, and an assessment's head with its policy document. Invented records."""

from __future__ import annotations

from dataclasses import replace

import pytest

from service.store import make_store

from .test_port import record


@pytest.fixture
def store(migrated_url: str):
    made = make_store(migrated_url)
    yield made
    made.close()


def saved(store, aid: str, version: str, verdict: str, model: str = "orchard-yield") -> None:
    (out,) = store.save_assessments(
        [replace(record(aid), version=version, verdict=verdict, model=model)]
    )
    assert out.id == aid


def test_latest_pass_is_the_newest_version_whose_latest_verdict_passed(store):
    saved(store, "a1", "2026.10", "pass")
    saved(store, "a2", "2026.11", "pass")
    saved(store, "a3", "2026.11", "fail")  # 2026.11 re-assessed: its latest verdict is fail
    saved(store, "a4", "2026.12", "warn")
    saved(store, "x1", "2027.01", "pass", model="another-model")
    found = store.latest_passing_assessment(model="orchard-yield")
    assert (found.id, found.version) == ("a1", "2026.10")
    saved(store, "a5", "2026.12", "pass")
    assert store.latest_passing_assessment(model="orchard-yield").id == "a5"
    # The version being assessed is left out: the newest other passing version.
    other = store.latest_passing_assessment(model="orchard-yield", exclude_version="2026.12")
    assert other.id == "a1"
    assert store.latest_passing_assessment(model="no-such-model") is None


def test_the_head_comes_with_its_summary_and_policy_document(store):
    saved(store, "h1", "3", "pass")
    head = store.assessment_head(assessment_id="h1")
    assert head.summary.id == "h1" and head.summary.version == "3"
    assert head.head == b'{"id":"h1","verdict":"pass"}'
    assert head.policy_document == {"name": "default"}
    assert store.assessment_head(assessment_id="missing") is None
