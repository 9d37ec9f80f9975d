"""The catalogue of checks: what each tests, its defaults and its published source, read from
the declarations in :mod:`service.core.checks`."""

from __future__ import annotations

from dataclasses import dataclass

from .registry import all_checks
from .results import CheckKind


@dataclass(frozen=True)
class CheckSpec:
    """Static description of one check."""

    name: str
    title: str
    kind: CheckKind
    family: str
    needs_holdout: bool
    tests: str
    null_hypothesis: str
    defaults: str
    details: tuple[str, ...]
    source: str


CATALOGUE: tuple[CheckSpec, ...] = tuple(
    CheckSpec(
        name=c.name,
        title=c.title,
        kind=c.kind,
        family=c.family,
        needs_holdout=c.needs_holdout,
        tests=c.tests,
        null_hypothesis=c.null_hypothesis,
        defaults=c.defaults,
        details=c.details,
        source=c.source,
    )
    for c in all_checks()
)

CHECK_NAMES: tuple[str, ...] = tuple(spec.name for spec in CATALOGUE)
SPECS = {spec.name: spec for spec in CATALOGUE}
