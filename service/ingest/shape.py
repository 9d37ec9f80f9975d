"""The request's shape, defined once: every field of the body, a series and its holdout.

The JSON parser names unknown fields from these tables, the OpenAPI request models
(``service.api.schemas``) are built from them, and the report's reading of stored inputs
(``service.report.inputs``) is tested against them. A field's ``kind`` says what it holds:

=========== ==========================================================
``text``    a string (names are at most ``MAX_NAME_LENGTH`` characters)
``integer`` a whole number
``number``  a number
``numbers`` an array of numbers, ``null`` where a value is missing
``strings`` an array of strings (ISO 8601 timestamps)
``policy``  a stored policy's name or an inline policy document
``labels``  an object of string values
``baseline`` the version to compare against: ``{"version": "..."}``
``series``  the array of series objects
``holdout`` the holdout object of one series
=========== ==========================================================

Bounds are the documented ones (``minimum`` inclusive, ``above``/``below`` exclusive); the
parser checks the same and, beyond them, the limits of :mod:`service.ingest.request`.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Literal

Kind = Literal[
    "text",
    "integer",
    "number",
    "numbers",
    "strings",
    "policy",
    "labels",
    "baseline",
    "series",
    "holdout",
]


@dataclass(frozen=True)
class FieldSpec:
    """One field of the request: its name, what it holds, whether it must be given, the
    default when not, its bounds, and the words and example that document it."""

    name: str
    kind: Kind
    required: bool = False
    default: Any = None
    minimum: float | None = None
    above: float | None = None
    below: float | None = None
    description: str | None = None
    example: Any = None


ENVELOPE: tuple[FieldSpec, ...] = (
    FieldSpec("model", "text", required=True, example="weekly-demand"),
    FieldSpec("version", "text", required=True, example="2026.11.30"),
    FieldSpec(
        "policy",
        "policy",
        default="default",
        description="A stored policy's name (optionally name@version) or an inline policy "
        "document.",
    ),
    FieldSpec(
        "season_length",
        "integer",
        default=1,
        minimum=1,
        description="Seasonal period; 1 is non-seasonal.",
    ),
    FieldSpec(
        "model_params",
        "integer",
        default=0,
        minimum=0,
        description="Parameters the model estimated.",
    ),
    FieldSpec(
        "burn_in",
        "integer",
        default=0,
        minimum=0,
        description="Periods dropped at the start of every series before any check (a model's "
        "start-up values, e.g. an ARIMA's first d + mD fitted values): their fitted values "
        "count as missing, their actuals stay training data. Default 0.",
    ),
    FieldSpec("labels", "labels"),
    FieldSpec(
        "baseline",
        "baseline",
        description="Compare the holdout with a stored version of the same model: "
        '{"version": "2026.11.02"}, or {"version": "latest-pass"} for the newest other '
        "version whose latest verdict passed.",
        example={"version": "latest-pass"},
    ),
    FieldSpec("series", "series", required=True),
)
"""The body of ``POST /v1/assessments`` as JSON."""

SERIES: tuple[FieldSpec, ...] = (
    FieldSpec(
        "id",
        "text",
        required=True,
        description="Unique within the request.",
        example="depot-4/sku-118",
    ),
    FieldSpec("actuals", "numbers", required=True, description="Training-period observations."),
    FieldSpec(
        "fitted",
        "numbers",
        required=True,
        description="One-step in-sample fitted values, same length; null where none.",
    ),
    FieldSpec("timestamps", "strings", description="ISO 8601, strictly increasing."),
    FieldSpec(
        "weight",
        "number",
        minimum=0,
        description=(
            "Used when the policy weighs series as given (`given`, or `auto` when weights "
            "are sent). Default: the volume, sum over periods of max(|actual|, |fitted|)."
        ),
    ),
    FieldSpec(
        "burn_in",
        "integer",
        minimum=0,
        description="This series' own burn-in, instead of the request's.",
    ),
    FieldSpec("holdout", "holdout"),
)
"""One object of ``series``."""

HOLDOUT: tuple[FieldSpec, ...] = (
    FieldSpec("actuals", "numbers", required=True, description="Out-of-sample observations."),
    FieldSpec(
        "forecasts", "numbers", required=True, description="Forecasts for them, same length."
    ),
    FieldSpec("lower", "numbers", description="Interval lower bounds."),
    FieldSpec("upper", "numbers", description="Interval upper bounds."),
    FieldSpec("level", "number", above=0, below=1, description="Nominal coverage, default 0.95."),
    FieldSpec("timestamps", "strings", description="ISO 8601, strictly increasing."),
)
"""The ``holdout`` object of one series."""


def spec(fields: tuple[FieldSpec, ...], name: str) -> FieldSpec:
    """The field called ``name`` in ``fields``."""
    for f in fields:
        if f.name == name:
            return f
    raise KeyError(name)


TOP_LEVEL_FIELDS = frozenset(f.name for f in ENVELOPE)
SERIES_FIELDS = frozenset(f.name for f in SERIES)
HOLDOUT_FIELDS = frozenset(f.name for f in HOLDOUT)
BASELINE_FIELDS = frozenset({"version"})
"""The fields of the ``baseline`` object."""
LATEST_PASS = "latest-pass"
"""The ``baseline.version`` that names the newest other version whose latest verdict passed."""
