"""The shared shapes of request parsing: limits, error types, the parsed request.

:class:`RequestInvalid` (and its subclass :class:`RequestUnparseable`) carry every problem found
with the field it concerns; :class:`Errors` collects them, as many as :data:`MAX_ERRORS` at a
time, and raises once at a checkpoint. Both parsers read a body into one :class:`Envelope` (the
request's own fields) and one :class:`SeriesColumns` (every series, field by field, as flat
arrays), from which :func:`service.ingest.assemble.build_request` makes the
:class:`AssessmentRequest` they return.
:class:`NonFinite` marks a ``NaN``/``Infinity`` literal or an overflowing number in a decoded
body, and :func:`describe` names a value's kind in an error message.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from service.core import SeriesBatch
from service.core.batch import MAX_MAGNITUDE

MAX_ERRORS = 50
"""At most this many problems are reported for one request."""

MAX_NAME_LENGTH = 200
NUL_MESSAGE = "must not contain NUL characters"
MAX_ABS_VALUE = MAX_MAGNITUDE
"""Largest magnitude accepted for a number: the core's limit (sums over a long series must stay
finite), checked here so the error names the field and the position."""


class RequestInvalid(ValueError):
    """The request is well-formed but its content is invalid.

    ``errors`` is a list of ``{"loc": "series[3].fitted", "message": "..."}``.
    """

    def __init__(self, errors: Sequence[Mapping[str, str]], detail: str | None = None) -> None:
        self.errors = [{"loc": str(e["loc"]), "message": str(e["message"])} for e in errors]
        if detail is None:
            first = self.errors[0] if self.errors else {"loc": "body", "message": "invalid"}
            more = len(self.errors) - 1
            detail = f"{first['loc']}: {first['message']}" + (
                f" (and {more} more problem{'s' if more > 1 else ''})" if more > 0 else ""
            )
        self.detail = detail
        super().__init__(detail)


class RequestUnparseable(RequestInvalid):
    """The body is not valid JSON (or CSV) at all."""


@dataclass(frozen=True, eq=False)
class AssessmentRequest:
    """A parsed, validated assessment request.

    ``policy`` is a stored policy's name or an inline policy document (a dict, validated by the
    gate); ``baseline`` the version its holdout is to be compared with (the service resolves
    it against the store). ``timestamps`` and ``holdout_timestamps`` hold one list of ISO 8601
    strings per series (``None`` where a series has none; a columnar upload's make each
    series' list when it is asked for). ``train_lengths`` /
    ``holdout_lengths`` are the lengths of the arrays as sent and ``weights_given`` the weights
    as sent (``None``: the default), so stored inputs can be given back exactly. ``burn_in`` is
    each series' burn-in as applied (its own, else the request's ``request_burn_in``),
    ``burn_in_given`` the per-series values
    as sent; ``fitted_given`` the fitted values as sent (the batch's hold NaN over a burn-in).
    """

    model: str
    version: str
    policy: str | dict[str, Any]
    season_length: int
    model_params: int
    labels: dict[str, str]
    ids: tuple[str, ...]
    batch: SeriesBatch
    timestamps: Sequence[list[str] | None]
    holdout_timestamps: Sequence[list[str] | None]
    train_lengths: np.ndarray
    holdout_lengths: np.ndarray
    weights_given: tuple[float | None, ...]
    baseline: str | None = None
    """The ``baseline.version`` asked for (a stored version or ``latest-pass``), or ``None``."""
    request_burn_in: int = 0
    burn_in: np.ndarray | None = None
    burn_in_given: tuple[int | None, ...] = ()
    fitted_given: np.ndarray | None = None

    @property
    def n_series(self) -> int:
        return len(self.ids)

    def burn_in_of(self, i: int) -> int:
        """Series ``i``'s burn-in as applied."""
        return 0 if self.burn_in is None else int(self.burn_in[i])

    def fitted_sent(self, i: int) -> np.ndarray:
        """Series ``i``'s fitted values as sent (its training length)."""
        source = self.batch.fitted if self.fitted_given is None else self.fitted_given
        return source[i, : int(self.train_lengths[i])]


@dataclass(frozen=True)
class Envelope:
    """The request's own fields, checked (``policy`` a name or an inline document)."""

    model: str
    version: str
    policy: str | dict[str, Any]
    season_length: int
    model_params: int
    labels: dict[str, str]
    baseline: str | None = None
    burn_in: int = 0


@dataclass(frozen=True, eq=False)
class FlatRows:
    """One numeric field of every series: the values joined into one float array (NaN where
    missing) and each series' length."""

    values: np.ndarray
    lengths: np.ndarray


@dataclass(frozen=True, eq=False)
class HoldoutColumns:
    """The holdouts of a request. ``lower``/``upper`` are ``None`` when no series has an
    interval, and then hold a zero length for a series without one; ``levels`` holds a series'
    level only where it has an interval."""

    actuals: FlatRows
    forecasts: FlatRows
    lower: FlatRows | None
    upper: FlatRows | None
    levels: list[float | None]
    timestamps: Sequence[list[str] | None]


@dataclass(frozen=True, eq=False)
class SeriesColumns:
    """Every series of a request, field by field, checked value by value but not yet against
    each other (interval bounds) or by the core."""

    ids: list[str]
    actuals: FlatRows
    fitted: FlatRows
    timestamps: Sequence[list[str] | None]
    weights: list[float | None]
    holdout: HoldoutColumns | None
    burn_in: list[int | None] | None = None
    """Each series' own burn-in as sent (``None``: the request's)."""


class Errors:
    """Collects problems; raises once at a checkpoint."""

    def __init__(self) -> None:
        self.items: list[dict[str, str]] = []

    def add(self, loc: str, message: str) -> None:
        if len(self.items) < MAX_ERRORS:
            self.items.append({"loc": loc, "message": message})

    @property
    def full(self) -> bool:
        return len(self.items) >= MAX_ERRORS

    def check(self) -> None:
        if self.items:
            raise RequestInvalid(self.items)


class NonFinite:
    """Placeholder for a ``NaN``/``Infinity`` literal or an overflowing number in the body."""

    __slots__ = ("text",)

    def __init__(self, text: str) -> None:
        self.text = text

    def describe(self) -> str:
        if self.text in ("NaN", "Infinity", "-Infinity"):
            return f"{self.text} is not a JSON number: send null for a missing value"
        return f"the number {self.text[:40]} overflows a 64-bit float"


QUOTE_LIMIT = 40
"""Most characters of a piece of input an error message quotes."""


def quote(text: str, limit: int = QUOTE_LIMIT) -> str:
    """``text`` as an error quotes it: its repr, cut to ``limit`` characters with the full
    length said, so an error never copies a whole input back."""
    if len(text) <= limit:
        return repr(text)
    return f"{text[:limit]!r}... ({len(text):,} characters)"


def describe(value: Any) -> str:
    if isinstance(value, NonFinite):
        return value.describe()
    if value is None:
        return "null"
    if isinstance(value, bool):
        return "a boolean"
    if isinstance(value, str):
        if not value:
            return "an empty string"
        return "a string of blanks only" if not value.strip() else "a string"
    if isinstance(value, (list, tuple)):
        return "an array"
    if isinstance(value, dict):
        return "an object"
    return type(value).__name__
