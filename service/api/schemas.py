"""Request and response shapes, for validation of small bodies and for the OpenAPI document.

Assessment bodies are parsed by :mod:`service.ingest` (fast, vectorised); the models here only
describe them in the OpenAPI document, built from the request's field tables
(:mod:`service.ingest.shape`). Small bodies (tokens) are validated with these models.
"""

from __future__ import annotations

from collections.abc import Mapping
from datetime import datetime
from typing import Any, Literal

from pydantic import BaseModel, ConfigDict, Field, create_model

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


class PolicyRef(BaseModel):
    name: str
    version: int


class Reason(BaseModel):
    check: str
    status: CheckStatus
    series_id: str | None
    message: str


class FleetCheck(BaseModel):
    name: str
    status: CheckStatus
    series_tested: int
    series_failed: int
    series_warned: int
    failed_share: float | None
    message: str


class SeriesCheck(BaseModel):
    name: str
    status: CheckStatus
    statistic: float | None
    p_value: float | None
    p_adjusted: float | None
    details: dict[str, Any]
    message: str | None = None


class SeriesBias(BaseModel):
    mean_error: float | None
    std_error: float | None
    ci_low: float | None
    ci_high: float | None
    percent_bias: float | None
    tracking_signal: float | None


class SeriesResult(BaseModel):
    id: str
    verdict: Verdict | Literal["skipped"]
    n_obs: int
    bias: SeriesBias | dict[str, Any]
    checks: list[SeriesCheck]


class AssessmentResult(BaseModel):
    """The full result of an assessment (``id`` is null when computed with ``store=false``)."""

    id: str | None
    created_at: datetime
    model: str
    version: str
    stored: bool
    labels: dict[str, str]
    season_length: int
    model_params: int
    policy: PolicyRef
    verdict: Verdict
    reasons: list[Reason]
    checks: list[FleetCheck]
    fleet: dict[str, Any]
    series: list[SeriesResult]


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
