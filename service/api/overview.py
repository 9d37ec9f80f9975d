"""Rows for BI tools: the assessment list as CSV, and the estate of models in one answer.

Both read what a stored result's head says beyond the summary columns (its labels and the
status of each check over the fleet) with :func:`head_facts`. CSV columns:

* the list (``GET /v1/assessments``, ``Accept: text/csv``): :data:`LIST_COLUMNS`, then one
  ``label.KEY`` column per label key found on the page (sorted; empty where an assessment has
  no such label);
* the models (``GET /v1/models``): :data:`MODEL_COLUMNS`, then the latest assessment's
  ``label.KEY`` columns the same way.

``n_passed``, ``n_warned`` and ``n_failed`` count series by verdict; ``checks_failed`` and
``checks_warned`` name the checks whose fleet status is fail or warn (space-separated, in the
catalogue's order), ``n_checks_failed`` and ``n_checks_warned`` count them.
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass, field
from datetime import datetime
from typing import Any

import orjson
from pydantic import BaseModel

from service.store.port import Store
from service.store.records import AssessmentSummary, ModelSummary

from .csvout import to_csv
from .schemas import PolicyRef, Verdict

LABEL_PREFIX = "label."
COUNT_COLUMNS = (
    "n_series",
    "n_passed",
    "n_warned",
    "n_failed",
    "n_checks_failed",
    "n_checks_warned",
    "checks_failed",
    "checks_warned",
)
LIST_COLUMNS = (
    "id",
    "created_at",
    "model",
    "version",
    "verdict",
    *COUNT_COLUMNS,
    "policy_name",
    "policy_version",
)
MODEL_COLUMNS = (
    "model",
    "version",
    "verdict",
    "assessment_id",
    "created_at",
    *COUNT_COLUMNS,
    "policy_name",
    "policy_version",
    "n_assessments",
    "n_versions",
)


@dataclass(frozen=True)
class HeadFacts:
    """What a stored head says beyond the summary columns."""

    labels: Mapping[str, str] = field(default_factory=dict)
    checks_failed: tuple[str, ...] = ()
    checks_warned: tuple[str, ...] = ()


def head_facts(head: bytes | None) -> HeadFacts:
    """The labels and the failing and warning checks of a stored head (none when absent)."""
    if not head:
        return HeadFacts()
    doc = orjson.loads(head)
    labels = doc.get("labels") or {}
    checks = [c for c in doc.get("checks") or () if isinstance(c, Mapping)]
    return HeadFacts(
        labels={str(k): str(v) for k, v in labels.items()},
        checks_failed=tuple(str(c.get("name")) for c in checks if c.get("status") == "fail"),
        checks_warned=tuple(str(c.get("name")) for c in checks if c.get("status") == "warn"),
    )


def facts_of(store: Store, rows: Sequence[AssessmentSummary]) -> list[HeadFacts]:
    """:func:`head_facts` of each row, read in one query."""
    heads = store.assessment_heads(seqs=[r.seq for r in rows]) if rows else {}
    return [head_facts(heads.get(r.seq)) for r in rows]


def _counts(r: AssessmentSummary, f: HeadFacts) -> dict[str, Any]:
    return {
        "n_series": r.n_series,
        "n_passed": r.n_series - r.n_failed - r.n_warned,
        "n_warned": r.n_warned,
        "n_failed": r.n_failed,
        "n_checks_failed": len(f.checks_failed),
        "n_checks_warned": len(f.checks_warned),
        "checks_failed": " ".join(f.checks_failed),
        "checks_warned": " ".join(f.checks_warned),
    }


def label_keys(facts: Iterable[HeadFacts]) -> list[str]:
    return sorted({k for f in facts for k in f.labels})


def _csv(
    columns: Sequence[str], rows: Sequence[Mapping[str, Any]], facts: Sequence[HeadFacts]
) -> bytes:
    keys = label_keys(facts)
    header = [*columns, *(LABEL_PREFIX + k for k in keys)]
    return to_csv(
        header,
        (
            [row[c] for c in columns] + [f.labels.get(k) for k in keys]
            for row, f in zip(rows, facts, strict=True)
        ),
    )


def list_csv(store: Store, rows: Sequence[AssessmentSummary]) -> bytes:
    """The CSV of a page of the assessment list."""
    facts = facts_of(store, rows)
    flat = [
        {
            "id": r.id,
            "created_at": r.created_at.isoformat(),
            "model": r.model,
            "version": r.version,
            "verdict": r.verdict,
            **_counts(r, f),
            "policy_name": r.policy_name,
            "policy_version": r.policy_version,
        }
        for r, f in zip(rows, facts, strict=True)
    ]
    return _csv(LIST_COLUMNS, flat, facts)


def model_rows(
    store: Store, models: Sequence[ModelSummary]
) -> tuple[list[dict[str, Any]], list[HeadFacts]]:
    """The JSON rows of ``GET /v1/models`` and the facts they were made from."""
    facts = facts_of(store, [m.latest for m in models])
    rows = []
    for m, f in zip(models, facts, strict=True):
        r = m.latest
        rows.append(
            {
                "model": r.model,
                "version": r.version,
                "verdict": r.verdict,
                "assessment_id": r.id,
                "created_at": r.created_at.isoformat(),
                **_counts(r, f),
                "checks_failed": list(f.checks_failed),
                "checks_warned": list(f.checks_warned),
                "policy": {"name": r.policy_name, "version": r.policy_version},
                "n_assessments": m.n_assessments,
                "n_versions": m.n_versions,
                "labels": dict(f.labels),
            }
        )
    return rows, facts


def models_csv(rows: Sequence[Mapping[str, Any]], facts: Sequence[HeadFacts]) -> bytes:
    flat = [
        {
            **row,
            "checks_failed": " ".join(row["checks_failed"]),
            "checks_warned": " ".join(row["checks_warned"]),
            "policy_name": row["policy"]["name"],
            "policy_version": row["policy"]["version"],
        }
        for row in rows
    ]
    return _csv(MODEL_COLUMNS, flat, facts)


class ModelOverview(BaseModel):
    """One model: its newest assessment's version, verdict and time, the series counts and
    failing checks of that assessment, and how many assessments and versions it has."""

    model: str
    version: str
    verdict: Verdict
    assessment_id: str
    created_at: datetime
    n_series: int
    n_passed: int
    n_warned: int
    n_failed: int
    n_checks_failed: int
    n_checks_warned: int
    checks_failed: list[str]
    checks_warned: list[str]
    policy: PolicyRef
    n_assessments: int
    n_versions: int
    labels: dict[str, str]


class ModelList(BaseModel):
    items: list[ModelOverview]
