"""The records of an assessment result: frozen dataclasses whose fields, in order, are the
keys of their JSON objects, in order; the series kept column by column."""

from __future__ import annotations

import dataclasses
from collections.abc import Iterable, Iterator, Mapping, Sequence
from dataclasses import dataclass, field
from enum import StrEnum
from itertools import repeat
from types import MappingProxyType
from typing import Any, overload

from ._shape import _check_length, _freeze, _frozen_columns, _made, _maker, _rows, json_fields


class Status(StrEnum):
    """Outcome of one check on one series, or of the whole fleet."""

    PASS = "pass"
    WARN = "warn"
    FAIL = "fail"
    SKIPPED = "skipped"

    @property
    def severity(self) -> int:
        """Ordering used for "worst first": fail > warn > pass > skipped."""
        return _SEVERITY[self]


_SEVERITY = {Status.SKIPPED: 0, Status.PASS: 1, Status.WARN: 2, Status.FAIL: 3}
_STATUS_OF = {s.value: s for s in Status}

VERDICTS = ("pass", "warn", "fail")
"""Verdicts from best to worst (a series or a fleet is never ``skipped``)."""

_RANK = {v: i for i, v in enumerate(VERDICTS)}


def verdict_blocks(verdict: str, fail_on: str = "fail") -> bool:
    """True when ``verdict`` is at or worse than ``fail_on`` (both one of :data:`VERDICTS`)."""
    if fail_on not in _RANK:
        raise ValueError(f"fail_on must be one of {', '.join(VERDICTS)}, got {fail_on!r}")
    if verdict not in _RANK:
        raise ValueError(f"verdict must be one of {', '.join(VERDICTS)}, got {verdict!r}")
    return _RANK[verdict] >= _RANK[fail_on]


# Field metadata: ``inline`` writes the field's entries into the parent object; ``values``
# narrows a status field; ``json=False`` keeps a field out of the JSON.
_INLINE = {"inline": True}
_VERDICT = {"values": VERDICTS}


# ------------------------------------------------------------------------------ records


class _Record:
    """What every record shares: its serializer and its reader, both made from its fields."""

    __slots__ = ()

    def to_dict(self) -> dict[str, Any]:
        """The JSON object (plain dicts, lists and scalars), keys in field order."""
        return serialize._TO_DICT[type(self)](self, serialize._table_rows)

    @classmethod
    def from_dict(cls, data: Any) -> Any:
        """Read the JSON object back; raises ``ValueError`` naming the first field that is
        off. ``cls.from_dict(d).to_dict() == d``."""
        return reading._read_record(cls, data, "")


@dataclass(frozen=True, slots=True)
class PolicyRef(_Record):
    """The policy an assessment was judged by."""

    name: str
    version: int


@dataclass(frozen=True, slots=True)
class Reason(_Record):
    """One warn or fail, as a sentence a person can act on; ``series_id`` is ``None`` for a
    fleet-level reason."""

    check: str
    status: Status
    series_id: str | None
    message: str


@dataclass(frozen=True, slots=True)
class CheckSummary(_Record):
    """One check over the fleet."""

    name: str
    status: Status
    series_tested: int
    series_failed: int
    series_warned: int
    series_skipped: int
    failed_share: float | None
    warned_share: float | None
    message: str
    fail_p_used: float | None = None
    """The p-value below which a series failed this test: its ``fail_p`` divided by the size
    of the fleet's fail family (``None`` for metrics and tests that do not fail)."""
    warn_p_used: float | None = None
    """Likewise for warn."""


@dataclass(frozen=True, slots=True)
class SeriesCheck(_Record):
    """One check on one series: its statistic, p-values (``None`` where the check has none or
    skipped), its details (effective parameters and side quantities) and its sentence."""

    name: str
    status: Status
    statistic: float | None
    p_value: float | None
    p_adjusted: float | None
    details: Mapping[str, Any]
    message: str

    def __post_init__(self) -> None:
        _freeze(self, "details")


@dataclass(frozen=True, slots=True)
class SeriesResult(_Record):
    """One series: its verdict (its worst check), residual count, weight, the sections the
    checks add (``sections["bias"]``, written into the JSON row under their keys; ``None``
    when the owning check did not run) and every check's entry, in catalogue order."""

    id: str
    verdict: Status = field(metadata=_VERDICT)
    n_obs: int
    weight: float | None
    sections: Mapping[str, Mapping[str, Any] | None] = field(metadata=_INLINE)
    checks: tuple[SeriesCheck, ...]

    def __post_init__(self) -> None:
        _freeze(self, "sections")

    def check(self, name: str) -> SeriesCheck | None:
        """The entry of check ``name``, or ``None`` when it did not run."""
        for c in self.checks:
            if c.name == name:
                return c
        return None


@dataclass(frozen=True, slots=True)
class FleetSummary(_Record):
    """Series counts by verdict and the fleet-level statistics the checks declare
    (``statistics["bias"]``, written into the JSON object under their keys)."""

    n_series: int
    n_failed: int
    n_warned: int
    n_passed: int
    statistics: Mapping[str, Mapping[str, Any]] = field(metadata=_INLINE)

    def __post_init__(self) -> None:
        _freeze(self, "statistics")


# ------------------------------------------------------------------------------ series table


@dataclass(frozen=True, slots=True)
class CheckColumns:
    """One check's entries of every series, column by column: the fields of
    :class:`SeriesCheck`, each a tuple with one JSON value per series (statuses as their
    strings; ``name`` is the check's; ``details`` holds one column per key)."""

    name: str
    status: tuple[str, ...]
    statistic: tuple[float | None, ...]
    p_value: tuple[float | None, ...]
    p_adjusted: tuple[float | None, ...]
    details: Mapping[str, tuple[Any, ...]]
    message: tuple[str, ...]

    def __post_init__(self) -> None:
        # Columns given as tuples (as the gate and the reader give them) are kept as they are.
        for f in _CHECK_COLUMNS:
            if type(getattr(self, f)) is not tuple:
                object.__setattr__(self, f, tuple(getattr(self, f)))
        object.__setattr__(self, "details", _frozen_columns(self.details))

    def __len__(self) -> int:
        return len(self.status)

    def entry(self, i: int) -> SeriesCheck:
        """The typed entry of series ``i``."""
        # From columns already checked (JSON scalars): made without checking them again.
        return _maker(SeriesCheck)(
            name=self.name,
            status=_STATUS_OF[self.status[i]],
            statistic=self.statistic[i],
            p_value=self.p_value[i],
            p_adjusted=self.p_adjusted[i],
            details=MappingProxyType({k: v[i] for k, v in self.details.items()}),
            message=self.message[i],
        )

    def rows(self, part: slice) -> CheckColumns:
        """The same check's columns for the series in ``part`` (a slice of rows)."""
        # Slices of columns already checked: made without checking them again.
        return _made(
            CheckColumns,
            name=self.name,
            **{f: getattr(self, f)[part] for f in _CHECK_COLUMNS},
            details=MappingProxyType({k: v[part] for k, v in self.details.items()}),
        )

    def to_dicts(self) -> list[dict[str, Any]]:
        """This check's entry of each series as JSON objects (the fields of SeriesCheck)."""
        n = len(self.status)
        columns: list[Any] = []
        for f in _CHECK_FIELDS:
            if f == "name":
                columns.append(repeat(self.name, n))
            elif f == "details":
                columns.append(_rows(tuple(self.details), n, self.details.values()))
            else:
                columns.append(getattr(self, f))
        return _rows(_CHECK_FIELDS, n, columns)


@dataclass(frozen=True, slots=True)
class SeriesColumns:
    """Series rows column by column: the fields of :class:`SeriesResult`, each a tuple with
    one JSON value per series (verdicts as their strings); ``sections`` maps each section key
    to ``None`` (its check did not run) or to one column per section field; ``checks`` holds
    one :class:`CheckColumns` per check, in catalogue order."""

    id: tuple[str, ...]
    verdict: tuple[str, ...]
    n_obs: tuple[int, ...]
    weight: tuple[float | None, ...]
    sections: Mapping[str, Mapping[str, tuple[Any, ...]] | None]
    checks: tuple[CheckColumns, ...]

    def __post_init__(self) -> None:
        for f in _SERIES_COLUMNS:
            if type(getattr(self, f)) is not tuple:
                object.__setattr__(self, f, tuple(getattr(self, f)))
        sections = {
            key: None if cols is None else _frozen_columns(cols)
            for key, cols in self.sections.items()
        }
        object.__setattr__(self, "sections", MappingProxyType(sections))
        if type(self.checks) is not tuple:
            object.__setattr__(self, "checks", tuple(self.checks))
        n = len(self.id)
        for f in _SERIES_COLUMNS:
            _check_length(f, getattr(self, f), n)
        for c in self.checks:
            for f in _CHECK_COLUMNS:
                _check_length(f"{c.name}.{f}", getattr(c, f), n)
            for k, v in c.details.items():
                _check_length(f"{c.name}.details.{k}", v, n)
        for key, cols in sections.items():
            for k, v in (cols or {}).items():
                _check_length(f"{key}.{k}", v, n)

    def __len__(self) -> int:
        return len(self.id)

    def record(self, i: int) -> SeriesResult:
        """The typed record of series ``i``."""
        # From columns already checked (JSON scalars): made without checking them again.
        return _maker(SeriesResult)(
            id=self.id[i],
            verdict=_STATUS_OF[self.verdict[i]],
            n_obs=self.n_obs[i],
            weight=self.weight[i],
            sections=MappingProxyType(
                {
                    key: None
                    if cols is None
                    else MappingProxyType({k: v[i] for k, v in cols.items()})
                    for key, cols in self.sections.items()
                }
            ),
            checks=tuple(c.entry(i) for c in self.checks),
        )

    def rows(self, part: slice) -> SeriesColumns:
        """The columns of the series in ``part`` (a slice of rows)."""
        # Slices of columns already checked: made without checking them again.
        return _made(
            SeriesColumns,
            **{f: getattr(self, f)[part] for f in _SERIES_COLUMNS},
            sections=MappingProxyType(
                {
                    key: None
                    if cols is None
                    else MappingProxyType({k: v[part] for k, v in cols.items()})
                    for key, cols in self.sections.items()
                }
            ),
            checks=tuple(c.rows(part) for c in self.checks),
        )

    def to_dicts(self) -> list[dict[str, Any]]:
        """The JSON rows (the fields of :class:`SeriesResult`, each section in its place),
        built column by column."""
        n = len(self.id)
        per_check = [c.to_dicts() for c in self.checks]
        if per_check:
            checks: list[Any] = list(map(list, zip(*per_check, strict=True)))
        else:
            checks = [[] for _ in range(n)]
        keys: list[str] = []
        columns: list[Any] = []
        for f in _SERIES_FIELDS:
            if f == "sections":
                for key, cols in self.sections.items():
                    keys.append(key)
                    columns.append(
                        repeat(None, n) if cols is None else _rows(tuple(cols), n, cols.values())
                    )
            elif f == "checks":
                keys.append(f)
                columns.append(checks)
            else:
                keys.append(f)
                columns.append(getattr(self, f))
        return _rows(tuple(keys), n, columns)


@dataclass(frozen=True, slots=True, eq=False)
class SeriesTable(Sequence[SeriesResult]):
    """The series of an assessment: the rows ``start`` to ``stop`` of ``columns`` (all of
    them unless given; the gate's stacked submissions share one set of columns).

    A sequence of :class:`SeriesResult`: indexing or iterating makes the typed record of a
    series; :meth:`column` reads one field of every series and :meth:`to_dicts` builds the
    JSON rows column-wise, without making any record.
    """

    columns: SeriesColumns
    start: int = 0
    stop: int = -1

    def __post_init__(self) -> None:
        n = len(self.columns)
        stop = n if self.stop == -1 else self.stop
        if not 0 <= self.start <= stop <= n:
            raise ValueError(f"rows {self.start} to {stop} are not within {n} series")
        object.__setattr__(self, "stop", stop)

    @classmethod
    def of(cls, series: Iterable[SeriesResult]) -> SeriesTable:
        """A table of typed records (every one with the same sections and checks)."""
        return reading._read_table([s.to_dict() for s in series], "series")

    @classmethod
    def empty(cls) -> SeriesTable:
        """A table of no series."""
        return cls(SeriesColumns(id=(), verdict=(), n_obs=(), weight=(), sections={}, checks=()))

    @property
    def whole(self) -> bool:
        """True when the table spans all of its columns."""
        return self.start == 0 and self.stop == len(self.columns)

    def __len__(self) -> int:
        return self.stop - self.start

    @overload
    def __getitem__(self, i: int) -> SeriesResult: ...

    @overload
    def __getitem__(self, i: slice) -> SeriesTable: ...

    def __getitem__(self, i: int | slice) -> SeriesResult | SeriesTable:
        if isinstance(i, slice):
            first, last, step = i.indices(len(self))
            if step != 1:
                raise ValueError("a series table is sliced in steps of 1")
            return SeriesTable(self.columns, self.start + first, self.start + max(first, last))
        n = len(self)
        if not -n <= i < n:
            raise IndexError(f"series index {i} out of range for {n} series")
        return self.columns.record(self.start + i % n)

    def __iter__(self) -> Iterator[SeriesResult]:
        for i in range(self.start, self.stop):
            yield self.columns.record(i)

    def __eq__(self, other: object) -> bool:
        if not isinstance(other, SeriesTable):
            return NotImplemented
        if self.columns is other.columns:
            return (self.start, self.stop) == (other.start, other.stop)
        return len(self) == len(other) and self._own() == other._own()

    __hash__ = None  # type: ignore[assignment]

    def _own(self) -> SeriesColumns:
        return self.columns if self.whole else self.columns.rows(slice(self.start, self.stop))

    def column(self, name: str) -> tuple[Any, ...]:
        """One field of :class:`SeriesResult` (``"id"``, ``"verdict"``, ``"n_obs"``,
        ``"weight"``) for every series, as its JSON values."""
        if name not in _SERIES_COLUMNS:
            raise KeyError(f"{name!r} is not a column; the columns: {', '.join(_SERIES_COLUMNS)}")
        values = getattr(self.columns, name)
        return values if self.whole else values[self.start : self.stop]

    @property
    def ids(self) -> tuple[str, ...]:
        """Every series' id, in order."""
        return self.column("id")

    @property
    def check_names(self) -> tuple[str, ...]:
        """The checks every series lists, in order."""
        return tuple(c.name for c in self.columns.checks)

    def check_column(self, check: str, name: str) -> tuple[Any, ...]:
        """One field of :class:`SeriesCheck` (``"status"``, ``"statistic"``, ``"p_value"``,
        ``"p_adjusted"``, ``"message"``) of check ``check`` for every series, as its JSON
        values; ``KeyError`` when the check did not run."""
        if name not in _CHECK_COLUMNS:
            raise KeyError(f"{name!r} is not a column; the columns: {', '.join(_CHECK_COLUMNS)}")
        for c in self.columns.checks:
            if c.name == check:
                values = getattr(c, name)
                return values if self.whole else values[self.start : self.stop]
        raise KeyError(f"no check {check!r} in these series")

    def section_column(self, key: str, name: str) -> tuple[Any, ...] | None:
        """Field ``name`` of section ``key`` for every series; ``None`` when the section is
        ``None`` throughout (its check did not run)."""
        cols = self.columns.sections.get(key)
        if cols is None:
            return None
        values = cols[name]
        return values if self.whole else values[self.start : self.stop]

    def find(self, series_id: str) -> SeriesResult | None:
        """The series with this id, or ``None``."""
        try:
            return self[self.ids.index(series_id)]
        except ValueError:
            return None

    def to_dicts(self) -> list[dict[str, Any]]:
        """The JSON rows, built column by column; equal to ``[s.to_dict() for s in self]``."""
        return self._own().to_dicts()

    @classmethod
    def from_dicts(cls, rows: Any, path: str = "series") -> SeriesTable:
        """Read JSON series rows (every row with the same sections and the same checks in the
        same order, as the gate writes them); raises ``ValueError`` naming the first field
        that is off (under ``path``)."""
        return reading._read_table(rows, path)


# ------------------------------------------------------------------------------ the result


# Not slotted: one per assessment, and assigning to any attribute raises FrozenInstanceError.
@dataclass(frozen=True)
class AssessmentResult(_Record):
    """The gate's result over one fleet: the verdict, the policy it was judged by, the
    reasons (worst first), one summary per check, the fleet's counts and statistics, and
    every series."""

    verdict: Status = field(metadata=_VERDICT)
    policy: PolicyRef
    reasons: tuple[Reason, ...]
    checks: tuple[CheckSummary, ...]
    fleet: FleetSummary
    series: SeriesTable

    def __post_init__(self) -> None:
        object.__setattr__(self, "reasons", tuple(self.reasons))
        object.__setattr__(self, "checks", tuple(self.checks))

    @property
    def n_series(self) -> int:
        """How many series were assessed (``series`` may hold only some of them, when the
        answer was asked for with ``series=flagged`` or ``none``)."""
        return self.fleet.n_series

    def count(self, verdict: str) -> int:
        """How many series got ``verdict`` (from the fleet's counts)."""
        fleet = self.fleet
        counts = {"fail": fleet.n_failed, "warn": fleet.n_warned, "pass": fleet.n_passed}
        return counts.get(verdict, 0)

    def blocks(self, fail_on: str = "fail") -> bool:
        """True when the verdict is at or worse than ``fail_on``."""
        return verdict_blocks(self.verdict, fail_on)

    def check(self, name: str) -> CheckSummary | None:
        """The fleet summary of check ``name``, or ``None`` when it did not run."""
        for c in self.checks:
            if c.name == name:
                return c
        return None

    def summary(self, **options: Any) -> str:
        """The plain text the CLI prints (see :meth:`AssessmentDocument.summary`), for a
        result with no envelope (no model, not stored)."""
        return text._summary(self, None, **options)

    @classmethod
    def from_dict(cls, data: Any) -> AssessmentResult:
        """Read the JSON of a result; raises ``ValueError`` naming the first field that is
        off. ``AssessmentResult.from_dict(d).to_dict() == d``."""
        return reading._read_record(cls, data, "")


# Not slotted: one per assessment, and assigning to any attribute raises FrozenInstanceError.
@dataclass(frozen=True)
class AssessmentDocument(_Record):
    """An assessment as the API answers it: the envelope (``id`` is ``None`` when it was not
    stored), any further top-level fields a server added (``extra``, kept in order after the
    envelope) and the result, whose fields follow at the top level of the JSON.

    ``replayed`` is not part of the JSON: true when the server answered a repeated
    ``Idempotency-Key`` with the result it had stored before.
    """

    id: str | None
    created_at: str | None
    model: str
    version: str
    stored: bool
    labels: Mapping[str, str]
    season_length: int
    model_params: int
    extra: Mapping[str, Any] = field(metadata=_INLINE)
    result: AssessmentResult = field(metadata=_INLINE)
    replayed: bool = field(default=False, compare=False, metadata={"json": False})

    def __post_init__(self) -> None:
        _freeze(self, "labels")
        _freeze(self, "extra")

    # The parts of the result a caller reads most, at the top as in the JSON.
    @property
    def verdict(self) -> Status:
        return self.result.verdict

    @property
    def policy(self) -> PolicyRef:
        return self.result.policy

    @property
    def reasons(self) -> tuple[Reason, ...]:
        return self.result.reasons

    @property
    def checks(self) -> tuple[CheckSummary, ...]:
        return self.result.checks

    @property
    def fleet(self) -> FleetSummary:
        return self.result.fleet

    @property
    def series(self) -> SeriesTable:
        return self.result.series

    @property
    def n_series(self) -> int:
        return self.result.n_series

    def count(self, verdict: str) -> int:
        """How many series got ``verdict``."""
        return self.result.count(verdict)

    def blocks(self, fail_on: str = "fail") -> bool:
        """True when the verdict is at or worse than ``fail_on``."""
        return self.result.blocks(fail_on)

    def summary(
        self,
        *,
        fail_on: str | None = None,
        where: str | None = None,
        link: str | None = None,
        max_reasons: int = 15,
        more: str | None = None,
    ) -> str:
        """The plain text the CLI prints: the verdict, model and policy, the series counts,
        where it is stored, the first ``max_reasons`` reasons, the per-check table and, with
        ``fail_on``, whether the gate passes or blocks.

        ``where`` says why it was not stored (``"offline"``), ``link`` is a report link and
        ``more`` a hint after the count of the reasons left out.
        """
        return text._summary(
            self.result,
            self,
            fail_on=fail_on,
            where=where,
            link=link,
            max_reasons=max_reasons,
            more=more,
        )

    @classmethod
    def from_dict(cls, data: Any, *, replayed: bool = False) -> AssessmentDocument:
        """Read the API's JSON of an assessment; raises ``ValueError`` naming the first field
        that is off. ``AssessmentDocument.from_dict(d).to_dict() == d``."""
        doc = reading._read_record(cls, data, "")
        if replayed:
            object.__setattr__(doc, "replayed", True)
        return doc


_CHECK_FIELDS = tuple(s.name for s in json_fields(SeriesCheck))
_CHECK_COLUMNS = tuple(f for f in _CHECK_FIELDS if f not in ("name", "details"))
_SERIES_FIELDS = tuple(s.name for s in json_fields(SeriesResult))
_SERIES_COLUMNS = tuple(f for f in _SERIES_FIELDS if f not in ("sections", "checks"))
# The column classes mirror their records field by field.
if (
    tuple(f.name for f in dataclasses.fields(CheckColumns)) != _CHECK_FIELDS
    or tuple(f.name for f in dataclasses.fields(SeriesColumns)) != _SERIES_FIELDS
):  # pragma: no cover - a field added to one and not the other
    raise TypeError("CheckColumns and SeriesColumns must have the fields of their records")


# The serializer, the reader and the text, which read these classes, come last.
from . import reading, serialize, text  # noqa: E402
