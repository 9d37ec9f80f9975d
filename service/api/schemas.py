"""Request and response shapes, for validation of small bodies and for the OpenAPI document.

Assessment bodies are parsed by :mod:`service.ingest` (fast, vectorised); the models here only
describe them in the OpenAPI document, built from the request's field tables
(:mod:`service.ingest.shape`). Small bodies (tokens) are validated with these models.
"""

from __future__ import annotations

import dataclasses
import typing
from collections.abc import Mapping
from datetime import datetime
from typing import Any, Literal

from pydantic import BaseModel, ConfigDict, Field, create_model

from service import results
from service.core.registry import all_checks
from service.ingest import shape
from service.ingest.shape import FieldSpec

Verdict = Literal["pass", "warn", "fail"]
CheckStatus = Literal["pass", "warn", "fail", "skipped"]
Scope = Literal["submit", "read", "admin"]


class Problem(BaseModel):
    """An RFC 9457 problem document."""

    type: str = Field(examples=["urn:plumbline:problem:invalid-request"])
    title: str = Field(examples=["Unprocessable Content"])
    status: int = Field(examples=[422])
    detail: str = Field(examples=["series[3].fitted: has 150 values, actuals has 156"])
    errors: list[FieldError] | None = None


class FieldError(BaseModel):
    loc: str = Field(examples=["series[3].fitted"])
    message: str


# --- assessment request (documentation) -------------------------------------------------------
# Built from the field tables of service.ingest.shape, which the parser reads from too.

_KINDS: dict[str, Any] = {
    "text": str,
    "integer": int,
    "number": float,
    "numbers": list[float | None],
    "strings": list[str],
    "policy": str | dict[str, Any],
    "labels": dict[str, str],
}


def _field(spec: FieldSpec, nested: Mapping[str, type[BaseModel]]) -> tuple[Any, Any]:
    """(annotation, FieldInfo) of one request field."""
    annotation = nested[spec.name] if spec.kind in ("series", "holdout") else _KINDS[spec.kind]
    if spec.kind == "series":
        annotation = list[annotation]  # type: ignore[valid-type]
    options: dict[str, Any] = {
        key: value
        for key, value in (
            ("description", spec.description),
            ("ge", spec.minimum),
            ("gt", spec.above),
            ("lt", spec.below),
        )
        if value is not None
    }
    if spec.example is not None:
        options["examples"] = [spec.example]
    if spec.required:
        return annotation, Field(**options)
    if spec.kind == "labels":
        return annotation, Field(default_factory=dict, **options)
    if spec.default is None:
        annotation = annotation | None
    return annotation, Field(spec.default, **options)


def _body_model(
    name: str,
    fields: tuple[FieldSpec, ...],
    doc: str | None = None,
    nested: Mapping[str, type[BaseModel]] | None = None,
) -> type[BaseModel]:
    return create_model(  # type: ignore[call-overload]
        name,
        __config__=ConfigDict(extra="forbid"),
        __doc__=doc,
        __module__=__name__,
        **{f.name: _field(f, nested or {}) for f in fields},
    )


HoldoutBody = _body_model("HoldoutBody", shape.HOLDOUT)
SeriesBody = _body_model("SeriesBody", shape.SERIES, nested={"holdout": HoldoutBody})
AssessmentBody = _body_model(
    "AssessmentBody",
    shape.ENVELOPE,
    "Body of ``POST /v1/assessments`` as JSON.",
    nested={"series": SeriesBody},
)


# --- assessment responses ---------------------------------------------------------------------
#
# Derived from the typed result (service/results/), which owns the shape: one model per record,
# its fields in the record's order, an inline record's fields in its place, the series sections
# and fleet statistics the registered checks declare in theirs. tests/api/test_result_models.py
# validates every example answer and the demo's against them.


# Where the API says more than the record's type: the server always dates its answers.
_API_TYPES: dict[tuple[type, str], Any] = {(results.AssessmentDocument, "created_at"): datetime}
_MODELS: dict[type, type[BaseModel]] = {}
_DESCRIPTIONS = {
    results.AssessmentDocument: "The full result of an assessment (``id`` is null when computed "
    "with ``store=false``).",
}


def _annotation(hint: Any, values: tuple[str, ...] | None = None) -> Any:
    """The pydantic type of a record field's type."""
    base, nullable = results.optional(hint)
    if base is results.Status:
        out: Any = Literal[tuple(values or [s.value for s in results.Status])]  # type: ignore[valid-type]
    elif base is results.SeriesTable:
        out = list[_record_model(results.SeriesResult)]  # type: ignore[valid-type]
    elif isinstance(base, type) and base in _RECORDS:
        out = _record_model(base)
    elif typing.get_origin(base) is tuple:
        out = list[_annotation(typing.get_args(base)[0])]  # type: ignore[misc]
    elif typing.get_origin(base) is Mapping:
        out = dict[str, _annotation(typing.get_args(base)[1])]  # type: ignore[misc]
    else:
        out = base  # str, int, float, bool, Any
    return out | None if nullable else out


def _flat_model(name: str, fields: dict[str, Any]) -> type[BaseModel]:
    """A model of number fields (a section or a fleet statistic), each required."""
    return create_model(  # type: ignore[call-overload, no-any-return]
        name, __config__=ConfigDict(extra="forbid"), **{k: (t, ...) for k, t in fields.items()}
    )


def _sections() -> dict[str, Any]:
    """The series sections the checks declare: ``bias`` and the like, null when their check
    did not run."""
    out: dict[str, Any] = {}
    for check in all_checks():
        if check.section is not None:
            key = check.section.key
            fields = {field: float | None for field, _, _ in check.section.fields}
            out[key] = (_flat_model(f"Series{key.title()}", fields) | None, ...)
    return out


def _fleet_statistics() -> dict[str, Any]:
    """The fleet-level statistics the checks declare (``bias``): their record's fields, numbers
    or null (non-finite values are written as null)."""
    out: dict[str, Any] = {}
    for check in all_checks():
        if check.fleet is not None:
            record = type(check.fleet.empty.result)
            hints = typing.get_type_hints(record)
            fields = {f.name: _statistic_type(hints[f.name]) for f in dataclasses.fields(record)}
            out[check.fleet.key] = (_flat_model(f"Fleet{check.fleet.key.title()}", fields), ...)
    return out


def _statistic_type(hint: Any) -> Any:
    """A fleet statistic's JSON type: counts are integers, flags true/false, labels strings,
    every other figure a number; null where the value is missing or not finite."""
    base, nullable = results.optional(hint)
    if base is int and not nullable:
        return int
    if base in (int, str, bool):
        return base | None
    return float | None


def _record_model(cls: type) -> type[BaseModel]:
    if cls in _MODELS:
        return _MODELS[cls]
    fields: dict[str, Any] = {}
    extra = "forbid"
    for f in _inlined(cls):
        if not f.inline:
            hint = _API_TYPES.get((cls, f.name))
            fields[f.name] = (_annotation(f.hint, f.values) if hint is None else hint, ...)
        elif cls is results.SeriesResult:
            fields.update(_sections())
        elif cls is results.FleetSummary:
            fields.update(_fleet_statistics())
        else:  # the document's further top-level fields
            extra = "allow"
    _MODELS[cls] = model = create_model(  # type: ignore[call-overload]
        cls.__name__,
        __config__=ConfigDict(extra=extra),
        __doc__=_DESCRIPTIONS.get(cls),
        **fields,
    )
    return model  # type: ignore[no-any-return]


def _inlined(cls: type) -> list[results.JsonField]:
    """The record's JSON fields with each inline record's own fields in its place."""
    out: list[results.JsonField] = []
    for f in results.json_fields(cls):
        if f.inline and f.hint in _RECORDS:
            out += _inlined(f.hint)
        else:
            out.append(f)
    return out


_RECORDS = (
    results.PolicyRef,
    results.Reason,
    results.CheckSummary,
    results.SeriesCheck,
    results.SeriesResult,
    results.FleetSummary,
    results.AssessmentResult,
    results.AssessmentDocument,
)

PolicyRef = _record_model(results.PolicyRef)
AssessmentDocument = _record_model(results.AssessmentDocument)


class AssessmentSummary(BaseModel):
    id: str
    created_at: datetime
    model: str
    version: str
    verdict: Verdict
    n_series: int
    n_failed: int
    n_warned: int
    policy: PolicyRef


class AssessmentPage(BaseModel):
    items: list[AssessmentSummary]
    next_cursor: str | None


class SeriesRow(BaseModel):
    """One series and one check of an assessment."""

    assessment_id: str
    series_id: str
    series_verdict: str
    n_obs: int
    check: str
    status: CheckStatus
    statistic: float | None
    p_value: float | None
    p_adjusted: float | None
    message: str | None
    details: dict[str, Any]


class SeriesRowPage(BaseModel):
    assessment_id: str
    items: list[SeriesRow]
    next_cursor: str | None = Field(None, description="the next page's cursor; null: last page")
    next: str | None = Field(None, description="the next page's path and query; null: last")


class ModelVerdict(BaseModel):
    model: str
    version: str
    verdict: Verdict
    assessment_id: str
    created_at: datetime
    policy: PolicyRef
    require: Verdict | None = None
    met: bool | None = None


# --- catalogue, policies, tokens --------------------------------------------------------------


class CheckInfo(BaseModel):
    name: str
    kind: str
    family: str
    needs_holdout: bool
    tests: str
    null_hypothesis: str
    defaults: str
    details: list[str]
    source: str
    default_policy: Any = Field(None, description="The default policy's settings for it.")


class CheckCatalogue(BaseModel):
    checks: list[CheckInfo]
    default_policy: dict[str, Any]


class StoredPolicyOut(BaseModel):
    name: str
    version: int
    created_at: datetime | None
    builtin: bool = False
    document: dict[str, Any]


class PolicyList(BaseModel):
    items: list[StoredPolicyOut]


class TokenRequest(BaseModel):
    model_config = ConfigDict(extra="forbid")

    scopes: list[Scope] = Field(min_length=1, examples=[["read"]])
    label: str = Field("", max_length=200, pattern=r"^[^\x00]*$", examples=["dashboard"])


class TokenCreated(BaseModel):
    id: str
    token: str = Field(description="The secret, shown this once; only its hash is kept.")
    scopes: list[Scope]
    label: str
    created_at: datetime


class TokenInfo(BaseModel):
    id: str
    scopes: list[Scope]
    label: str
    created_at: datetime
    revoked_at: datetime | None


class TokenList(BaseModel):
    items: list[TokenInfo]


Problem.model_rebuild()


class PolicyDocument(BaseModel):
    """A gate policy document: ``name`` plus the gate's settings (see ``GET /v1/checks`` for
    the default policy's document); the store assigns ``version``."""

    model_config = ConfigDict(extra="allow")

    name: str = Field(pattern=r"^[A-Za-z0-9][A-Za-z0-9._-]{0,99}$", examples=["strict-weekly"])


# Schemas the OpenAPI document lists for bodies the endpoints read themselves.
BODY_SCHEMAS: tuple[type[BaseModel], ...] = (AssessmentBody, TokenRequest, PolicyDocument)
