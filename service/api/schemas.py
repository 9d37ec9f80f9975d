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
from typing import TYPE_CHECKING, Any, Literal

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
    nests = ("series", "holdout", "baseline")
    annotation = nested[spec.name] if spec.kind in nests else _KINDS[spec.kind]
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


class BaselineBody(BaseModel):
    """The stored version of the same model the holdout is compared with."""

    model_config = ConfigDict(extra="forbid")

    version: str = Field(
        min_length=1,
        max_length=200,
        description="A stored version of the same model, or latest-pass: the newest other "
        "version whose latest verdict passed.",
        examples=["latest-pass", "2026.11.02"],
    )


HoldoutBody = _body_model("HoldoutBody", shape.HOLDOUT)
SeriesBody = _body_model("SeriesBody", shape.SERIES, nested={"holdout": HoldoutBody})
AssessmentBody = _body_model(
    "AssessmentBody",
    shape.ENVELOPE,
    "Body of ``POST /v1/assessments`` as JSON.",
    nested={"series": SeriesBody, "baseline": BaselineBody},
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
_DESCRIPTIONS: dict[type, str] = {
    results.AssessmentDocument: "The full result of an assessment (``id`` is null when computed "
    "with ``store=false``).",
}


def _annotation(hint: Any, values: tuple[str, ...] | None = None) -> Any:
    """The pydantic type of a record field's type."""
    base, nullable = results.optional(hint)
    if base is results.Status:
        out: Any = Literal[tuple(values or [s.value for s in results.Status])]
    elif base is results.SeriesTable:
        out = list.__class_getitem__(_record_model(results.SeriesResult))
    elif isinstance(base, type) and base in _RECORDS:
        out = _record_model(base)
    elif typing.get_origin(base) is tuple:
        out = list.__class_getitem__(_annotation(typing.get_args(base)[0]))
    elif typing.get_origin(base) is Mapping:
        out = dict.__class_getitem__((str, _annotation(typing.get_args(base)[1])))
    else:
        out = base  # str, int, float, bool, Any
    return out | None if nullable else out


def _flat_model(name: str, fields: dict[str, Any]) -> type[BaseModel]:
    """A model of number fields (a section or a fleet statistic), each required."""
    required: dict[str, Any] = {k: (t, ...) for k, t in fields.items()}
    return create_model(name, __config__=ConfigDict(extra="forbid"), **required)


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
            model = _flat_model(f"Fleet{check.fleet.key.title()}", fields)
            # A check that applies to some batches only (the baseline comparison) writes its
            # statistic only into their results: not required.
            out[check.fleet.key] = (model, ...) if check.applies is None else (model, None)
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
    extra: Literal["allow", "forbid"] = "forbid"
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
    _MODELS[cls] = model = create_model(
        cls.__name__,
        __config__=ConfigDict(extra=extra),
        __doc__=_DESCRIPTIONS.get(cls),
        **fields,
    )
    return model


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

if TYPE_CHECKING:  # the derived model, as a type the checker can read

    class PolicyRef(BaseModel):
        name: str
        version: int

else:
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


class BaselineMatching(BaseModel):
    """How a baseline's holdout was matched to the new one: series by id, periods by
    timestamp when both sides give them, else by position; what found no match is counted
    (ids listed up to 100 per kind), never guessed."""

    requested: str = Field(description="The baseline as asked for: a version or latest-pass.")
    matched_series: int
    matched_periods: int
    matched_by: dict[str, int] = Field(description="Matched series by timestamp and by position.")
    unmatched_periods: int = Field(
        description="Holdout periods of matched series without a baseline value."
    )
    unmatched_series: int = Field(description="Series with a holdout and no baseline value.")
    unmatched_series_ids: list[str]
    baseline_only_series: int = Field(description="Baseline series the new version lacks.")
    baseline_only_series_ids: list[str]


class BaselineRecord(BaselineMatching):
    """The stored assessment an assessment's holdout was compared with (the ``baseline`` field
    of its result)."""

    version: str
    assessment_id: str
    created_at: datetime
    verdict: Verdict


class VerdictBaseline(BaselineRecord):
    """The latest assessment's comparison with its baseline: which one, the matching, the
    ``baseline_accuracy`` check's summary and fleet figures."""

    check: dict[str, Any] | None = None
    fleet: dict[str, Any] | None = None
    reasons: list[str] = Field(
        default_factory=list, description="The comparison's fleet-level reason sentences."
    )


class ModelVerdict(BaseModel):
    model: str
    version: str
    verdict: Verdict
    assessment_id: str
    created_at: datetime
    policy: PolicyRef
    require: Verdict | None = None
    met: bool | None = None
    baseline: VerdictBaseline | None = Field(
        None, description="Present when the latest assessment had a baseline."
    )


class ComparedVersion(BaseModel):
    version: str
    assessment_id: str
    created_at: datetime
    verdict: Verdict


class ComparedSeries(BaseModel):
    """One series of ``b`` against ``a``: the matching and the ``baseline_accuracy`` check's
    figures (its declared details in ``details``)."""

    series_id: str
    weight: float | None
    matched_periods: int
    unmatched_periods: int
    matched_by: Literal["timestamp", "position"] | None
    status: CheckStatus | None
    statistic: float | None
    p_value: float | None
    p_adjusted: float | None
    details: dict[str, Any]


class Comparison(BaseModel):
    """Version ``b`` against version ``a`` on their matched holdout periods."""

    model: str
    a: ComparedVersion
    b: ComparedVersion
    matching: BaselineMatching
    check: dict[str, Any] | None = Field(description="The check's summary over the fleet.")
    fleet: dict[str, Any] | None = Field(description="The check's fleet-level figures.")
    reasons: list[str] = Field(description="The comparison's fleet-level reason sentences.")
    series: list[ComparedSeries]


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


# --- jobs --------------------------------------------------------------------------------------


class JobProgress(BaseModel):
    series_done: int = Field(examples=[0])
    series_total: int = Field(examples=[4000])


class JobAssessmentLink(BaseModel):
    id: str
    href: str = Field(examples=["/v1/assessments/3f2b9c0d6a1e4f7e8d5c2b1a09f8e7d6"])


class Job(BaseModel):
    """A background assessment (``Prefer: respond-async``): its state, progress and, when
    done, the assessment it stored; when failed, the problem that stopped it."""

    id: str
    state: Literal["queued", "running", "done", "failed"]
    model: str
    version: str
    progress: JobProgress
    created_at: datetime
    started_at: datetime | None
    updated_at: datetime
    finished_at: datetime | None
    attempts: int = Field(description="How many times a worker has started the job.")
    assessment: JobAssessmentLink | None = Field(description="When done: the stored assessment.")
    error: Problem | None = Field(description="When failed: why (RFC 9457).")
