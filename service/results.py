"""The assessment result: typed, frozen records and the one serializer of its JSON.

The gate (:mod:`service.core.gate`) returns an :class:`AssessmentResult`; the API answers an
:class:`AssessmentDocument` (the result inside its envelope: id, model, version...); the
client, the CLI and the report read documents back with ``from_dict``. The JSON shape is owned
here: the fields of each record, in order, are the keys of its JSON object, in order (a field
marked ``inline`` writes its entries into the parent object in its place), ``to_dict()`` is the
only serializer and ``from_dict()`` reads the same shape back, raising ``ValueError`` naming
the first field that is off.

Series rows are kept column by column (:class:`SeriesTable`): one column per field of
:class:`SeriesResult` and, per check, one per field of :class:`SeriesCheck`. A typed record of
one series is made only when it is read; serializing a fleet of thousands of series builds its
JSON rows column-wise and makes no record per series.

Only the standard library is imported, so the client and the CLI read results without numpy or
the core. A verdict is statistical evidence under the stated assumptions, not a guarantee.
"""

from __future__ import annotations

import dataclasses
import types
import typing
from collections.abc import Callable, Iterable, Iterator, Mapping, Sequence
from dataclasses import dataclass, field
from enum import StrEnum
from functools import cache, lru_cache
from itertools import repeat
from operator import itemgetter
from types import MappingProxyType
from typing import Any, overload

__all__ = [
    "VERDICTS",
    "AssessmentDocument",
    "AssessmentResult",
    "CheckColumns",
    "CheckSummary",
    "FleetSummary",
    "JsonField",
    "PolicyRef",
    "Reason",
    "SeriesCheck",
    "SeriesColumns",
    "SeriesResult",
    "SeriesTable",
    "Status",
    "json_fields",
    "optional",
    "to_dicts",
    "verdict_blocks",
]


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
        return _TO_DICT[type(self)](self, _table_rows)

    @classmethod
    def from_dict(cls, data: Any) -> Any:
        """Read the JSON object back; raises ``ValueError`` naming the first field that is
        off. ``cls.from_dict(d).to_dict() == d``."""
        return _read_record(cls, data, "")


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
        return _read_table([s.to_dict() for s in series], "series")

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
        return _read_table(rows, path)


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
        return len(self.series)

    def count(self, verdict: str) -> int:
        """How many series got ``verdict``."""
        return self.series.column("verdict").count(verdict)

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
        return _summary(self, None, **options)

    @classmethod
    def from_dict(cls, data: Any) -> AssessmentResult:
        """Read the JSON of a result; raises ``ValueError`` naming the first field that is
        off. ``AssessmentResult.from_dict(d).to_dict() == d``."""
        return _read_record(cls, data, "")


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
        return _summary(
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
        doc = _read_record(cls, data, "")
        if replayed:
            object.__setattr__(doc, "replayed", True)
        return doc


# ------------------------------------------------------------------------------ plain text


def _share(value: float | None) -> str:
    return "-" if value is None else f"{100 * value:.1f}%"


def _summary(
    result: AssessmentResult,
    doc: AssessmentDocument | None,
    *,
    fail_on: str | None = None,
    where: str | None = None,
    link: str | None = None,
    max_reasons: int = 15,
    more: str | None = None,
) -> str:
    lines: list[str] = []
    w = lines.append
    parts = () if doc is None else (doc.model, doc.version)
    model = " ".join(p for p in parts if p) or "(no model given)"
    policy = result.policy.name or "?"
    if result.policy.version is not None:
        policy += f" v{result.policy.version}"
    w(f"verdict: {result.verdict.upper()}   model {model}   policy {policy}\n")
    w(
        f"series:  {result.n_series} assessed, {result.count('fail')} failed, "
        f"{result.count('warn')} warned, {result.count('pass')} passed\n"
    )
    if doc is not None and doc.id is not None:
        note = " (stored earlier under the same Idempotency-Key)" if doc.replayed else ""
        w(f"stored:  assessment {doc.id}{note}\n")
    else:
        w(f"stored:  no ({where})\n" if where else "stored:  no\n")
    if link:
        w(f"report:  {link}\n")

    if result.reasons:
        w("\nreasons (worst first):\n")
        shown = result.reasons[:max_reasons]
        width = max(len(r.check) for r in shown) if shown else 0
        for r in shown:
            target = f"[{r.series_id}] " if r.series_id is not None else ""
            w(f"  {r.status:<4}  {r.check:<{width}}  {target}{r.message}\n")
        left = len(result.reasons) - max_reasons
        if left > 0:
            w(f"  ... and {left} more" + (f" ({more})\n" if more else "\n"))

    if result.checks:
        w("\n")
        header = ("check", "status", "tested", "failed", "warned", "failed%")
        rows = [
            (
                c.name,
                str(c.status),
                str(c.series_tested),
                str(c.series_failed),
                str(c.series_warned),
                _share(c.failed_share),
            )
            for c in result.checks
        ]
        widths = [max(len(r[i]) for r in [header, *rows]) for i in range(len(header))]
        for row in [header, *rows]:
            left_cells = f"{row[0]:<{widths[0]}}  {row[1]:<{widths[1]}}"
            right = "  ".join(f"{cell:>{widths[i]}}" for i, cell in enumerate(row) if i >= 2)
            w(f"  {left_cells}  {right}\n")

    if fail_on is not None:
        blocks = result.blocks(fail_on)
        state = "BLOCKS" if blocks else "passes"
        relation = "is at or worse than" if blocks else "is better than"
        w(f"\ngate: {state} (verdict {result.verdict} {relation} --fail-on {fail_on})\n")
    return "".join(lines)


# ------------------------------------------------------------------------------ the serializer
#
# Each record's serializer is generated from its fields (as ``dataclasses`` generates
# ``__init__``): one dict display, keys in field order, so the shape lives in the field list
# and the serializer costs what a hand-written one would.


@dataclass(frozen=True)
class JsonField:
    """One field of a record as its JSON sees it: the key (``name``), the resolved type
    (``hint``), whether its entries are written into the parent object (``inline``) and, for a
    status, the values it may take (``values``; ``None``: every status)."""

    name: str
    hint: Any
    inline: bool
    values: tuple[str, ...] | None


def _specs(cls: type) -> tuple[JsonField, ...]:
    hints = typing.get_type_hints(cls)
    return tuple(
        JsonField(f.name, hints[f.name], bool(f.metadata.get("inline")), f.metadata.get("values"))
        for f in dataclasses.fields(cls)
        if f.metadata.get("json", True)
    )


def json_fields(cls: type) -> tuple[JsonField, ...]:
    """The JSON fields of a record class, in order (what its ``to_dict`` writes and its
    ``from_dict`` reads; an inline record's fields are its own)."""
    return _SPECS[cls]


def optional(hint: Any) -> tuple[Any, bool]:
    """``(X, True)`` for a type ``X | None``, else ``(hint, False)``."""
    return _optional(hint)


def _is_record(hint: Any) -> bool:
    return isinstance(hint, type) and issubclass(hint, _Record)


def _optional(hint: Any) -> tuple[Any, bool]:
    """``(X, True)`` for ``X | None``, else ``(hint, False)``."""
    if typing.get_origin(hint) in (typing.Union, types.UnionType):
        args = typing.get_args(hint)
        rest = [a for a in args if a is not type(None)]
        if len(rest) == 1 and len(args) == 2:
            return rest[0], True
    return hint, False


_SCALARS = (str, int, float, bool)


def _json_expr(hint: Any, access: str) -> str:
    """The expression that turns ``access`` (a field of type ``hint``) into JSON values."""
    if hint is Status:
        return f"str({access})"
    if hint is SeriesTable:
        return f"rows({access})"
    if _is_record(hint):
        return f"_to_dict_{hint.__name__}({access}, rows)"
    origin = typing.get_origin(hint)
    if origin is tuple and _is_record(typing.get_args(hint)[0]):
        return f"[_to_dict_{typing.get_args(hint)[0].__name__}(x, rows) for x in {access}]"
    if origin is Mapping:
        return f"_plain({access})"
    if _optional(hint)[0] in _SCALARS:
        return access
    raise TypeError(f"no JSON form for {hint!r}")


_LEAVES = frozenset({str, int, float, bool, type(None), list, tuple})


def _is_mapping(value: Any) -> bool:
    # The usual types first: cheaper than asking the Mapping ABC.
    t = type(value)
    return t is dict or t is MappingProxyType or (t not in _LEAVES and isinstance(value, Mapping))


def _plain(m: Mapping[str, Any]) -> dict[str, Any]:
    """A mapping (and the mappings nested in it) as plain dicts."""
    return {k: _plain(v) if _is_mapping(v) else v for k, v in m.items()}


def _frozen(value: Any) -> Any:
    """A mapping (and the mappings nested in it) as read-only views of copies."""
    if _is_mapping(value):
        return MappingProxyType({k: _frozen(v) for k, v in value.items()})
    return value


def _freeze(obj: Any, name: str) -> None:
    object.__setattr__(obj, name, _frozen(getattr(obj, name)))


# The generated functions' globals: the helpers and each serializer made so far, by class.
_NAMESPACE: dict[str, Any] = {"_plain": _plain}


def _compile(source: str, name: str) -> Callable[..., Any]:
    namespace = dict(_NAMESPACE)
    # The source is made of field names and repr()'d string keys only.
    exec(source, namespace)
    return namespace[name]


def _serializer(cls: type) -> Callable[[Any, Callable[[SeriesTable], list]], dict[str, Any]]:
    """``to_dict(record, rows)``: ``rows(table)`` gives the JSON rows of a series table."""
    entries = []
    for s in _specs(cls):
        expr = _json_expr(s.hint, f"self.{s.name}")
        entries.append(f"**{expr}" if s.inline else f"{s.name!r}: {expr}")
    source = f"def to_dict(self, rows):\n    return {{{', '.join(entries)}}}\n"
    fn = _compile(source, "to_dict")
    fn.__qualname__ = f"{cls.__name__}.to_dict"
    return fn


def _table_rows(table: SeriesTable) -> list[dict[str, Any]]:
    return table.to_dicts()


def to_dicts(records: Sequence[Any]) -> list[dict[str, Any]]:
    """``[r.to_dict() for r in records]``: where series tables are runs of one set of
    columns (the gate's stacked submissions), their rows are built in one pass over those
    columns and cut into runs, each row still handed out once."""
    built: dict[int, tuple[SeriesColumns, list[dict[str, Any]], bytearray]] = {}

    def rows(table: SeriesTable) -> list[dict[str, Any]]:
        if table.whole:
            return table.to_dicts()
        entry = built.get(id(table.columns))
        if entry is None:
            columns = table.columns
            entry = built[id(columns)] = (columns, columns.to_dicts(), bytearray(len(columns)))
        _, all_rows, given = entry
        if given.find(1, table.start, table.stop) != -1:  # rows handed out already
            return table.to_dicts()
        given[table.start : table.stop] = b"\x01" * len(table)
        return all_rows[table.start : table.stop]

    return [_TO_DICT[type(r)](r, rows) for r in records]


@lru_cache(maxsize=256)
def _row_maker(keys: tuple[str, ...]) -> Callable[..., list[dict[str, Any]]]:
    """``rows(*columns)``: one dict per position, ``keys`` in order, zipped from the columns."""
    args = ", ".join(f"c{i}" for i in range(len(keys)))
    items = ", ".join(f"{k!r}: v{i}" for i, k in enumerate(keys))
    names = "".join(f"v{i}, " for i in range(len(keys)))
    return _compile(
        f"def rows({args}):\n    return [{{{items}}} for {names}in zip({args})]\n", "rows"
    )


def _rows(keys: tuple[str, ...], n: int, columns: Any) -> list[dict[str, Any]]:
    if not keys:
        return [{} for _ in range(n)]
    return _row_maker(keys)(*columns)


@cache
def _maker(cls: type) -> Callable[..., Any]:
    """``make(**fields)``: an instance of the frozen ``cls`` from values already in their final
    form (slices and entries of checked columns), set without checking them again."""
    names = [f.name for f in dataclasses.fields(cls)]
    body = "".join(f"    _set(obj, {n!r}, {n})\n" for n in names)
    source = f"def make({', '.join(names)}):\n    obj = _new(_cls)\n{body}    return obj\n"
    namespace = {"_new": object.__new__, "_set": object.__setattr__, "_cls": cls}
    exec(source, namespace)  # the source is made of field names only
    return namespace["make"]


def _made(cls: type, **values: Any) -> Any:
    return _maker(cls)(**values)


def _frozen_columns(columns: Mapping[str, Any]) -> Mapping[str, tuple[Any, ...]]:
    if type(columns) is MappingProxyType and all(type(v) is tuple for v in columns.values()):
        return columns
    return MappingProxyType({k: v if type(v) is tuple else tuple(v) for k, v in columns.items()})


def _check_length(what: str, column: tuple[Any, ...], n: int) -> None:
    if len(column) != n:
        raise ValueError(f"series table: column {what} has {len(column)} entries, not {n}")


_TO_DICT: dict[type, Callable[..., dict[str, Any]]] = {}
_RECORDS: tuple[type, ...] = (
    PolicyRef,
    Reason,
    CheckSummary,
    SeriesCheck,
    SeriesResult,
    FleetSummary,
    AssessmentResult,
    AssessmentDocument,
)
for _cls in _RECORDS:  # in order: a record's serializer calls those of the records before it
    _TO_DICT[_cls] = _NAMESPACE[f"_to_dict_{_cls.__name__}"] = _serializer(_cls)
_SPECS = {cls: _specs(cls) for cls in _RECORDS}

_CHECK_FIELDS = tuple(s.name for s in _SPECS[SeriesCheck])
_CHECK_COLUMNS = tuple(f for f in _CHECK_FIELDS if f not in ("name", "details"))
_SERIES_FIELDS = tuple(s.name for s in _SPECS[SeriesResult])
_SERIES_COLUMNS = tuple(f for f in _SERIES_FIELDS if f not in ("sections", "checks"))
_CHECK_HINTS = {s.name: s.hint for s in _SPECS[SeriesCheck]}
_SERIES_SPECS = {s.name: s for s in _SPECS[SeriesResult]}
# The column classes mirror their records field by field.
if (
    tuple(f.name for f in dataclasses.fields(CheckColumns)) != _CHECK_FIELDS
    or tuple(f.name for f in dataclasses.fields(SeriesColumns)) != _SERIES_FIELDS
):  # pragma: no cover - a field added to one and not the other
    raise TypeError("CheckColumns and SeriesColumns must have the fields of their records")


# ------------------------------------------------------------------------------ the reader


def _where(path: str) -> str:
    return f"'{path}'" if path else "the document"


def _join(path: str, key: str) -> str:
    return f"{path}.{key}" if path else key


def _short(value: Any) -> str:
    if isinstance(value, Mapping):
        return "an object"
    if isinstance(value, list):
        return "a list"
    text = repr(value)
    return text if len(text) <= 40 else text[:37] + "..."


def _off(path: str, value: Any, expected: str) -> ValueError:
    return ValueError(f"{_where(path)} is {_short(value)}, expected {expected}")


_STATUS_VALUES = tuple(s.value for s in Status)


def _describe(hint: Any, values: tuple[str, ...] | None) -> str:
    base, optional = _optional(hint)
    if base is Status:
        text = "one of " + ", ".join(values or _STATUS_VALUES)
    elif base is bool:
        text = "true or false"
    elif base is int:
        text = "an integer"
    elif base is float:
        text = "a number"
    elif base is str:
        text = "a string"
    elif base is Any:
        text = "a number, a string, true, false or null"
    elif typing.get_origin(base) is tuple or base is SeriesTable:
        text = "a list"
    else:
        text = "an object"
    return text + (" or null" if optional else "")


def _is_json_scalar(value: Any) -> bool:
    return value is None or type(value) in _SCALARS


def _scalar_ok(base: Any, value: Any, values: tuple[str, ...] | None) -> bool:
    if base is Status:
        return isinstance(value, str) and value in (values or _STATUS_VALUES)
    if base is str:
        return isinstance(value, str)
    if base is bool:
        return isinstance(value, bool)
    if base is int:
        return isinstance(value, int) and not isinstance(value, bool)
    if base is float:
        return isinstance(value, (int, float)) and not isinstance(value, bool)
    if base is Any:  # in a column: a JSON scalar
        return _is_json_scalar(value)
    raise TypeError(f"not a scalar type: {base!r}")


def _read_value(hint: Any, value: Any, path: str, values: tuple[str, ...] | None = None) -> Any:
    """``value`` read as ``hint``; ``ValueError`` naming ``path`` when it is not one."""
    base, optional = _optional(hint)
    if value is None and optional:
        return None
    if base is Any:  # any JSON value, as it is
        return value
    if base is SeriesTable:
        return _read_table(value, path)
    if _is_record(base):
        return _read_record(base, value, path)
    origin = typing.get_origin(base)
    if origin is tuple:
        if not isinstance(value, list):
            raise _off(path, value, "a list")
        item = typing.get_args(base)[0]
        if item in _FLAT:
            return _read_flat_records(item, value, path)
        return tuple(_read_value(item, v, f"{path}[{i}]") for i, v in enumerate(value))
    if origin is Mapping:
        if not isinstance(value, Mapping):
            raise _off(path, value, _describe(hint, values))
        item = typing.get_args(base)[1]
        if item is Any:
            return dict(value)
        return {k: _read_value(item, v, _join(path, str(k))) for k, v in value.items()}
    if not _scalar_ok(base, value, values):
        raise _off(path, value, _describe(hint, values))
    return Status(value) if base is Status else value


def _read_record(cls: type, data: Any, path: str) -> Any:
    if not isinstance(data, Mapping):
        if not path:
            raise ValueError("expected a JSON object")
        raise _off(path, data, "an object")
    kwargs, rest = _read_fields(cls, data, path)
    if rest:
        raise ValueError(f"{_where(_join(path, rest[0]))} is not a field of {_NOUN[cls]}")
    return cls(**kwargs)


def _read_fields(cls: type, data: Mapping[str, Any], path: str) -> tuple[dict[str, Any], list]:
    """The fields of ``cls`` read from ``data`` and the keys left over, in order. An inline
    record takes its own fields; an inline mapping takes the keys left over."""
    kwargs: dict[str, Any] = {}
    taken: set[str] = set()
    spread = None
    # Inline records first: a document's result (its verdict first) before its envelope.
    for s in _SPECS[cls]:
        if s.inline and _is_record(s.hint):
            inner, _ = _read_fields(s.hint, data, path)
            kwargs[s.name] = s.hint(**inner)
            taken |= _KEYS[s.hint]
    for s in _SPECS[cls]:
        if s.inline and _is_record(s.hint):
            continue
        if s.inline:
            spread = s
        elif s.name not in data:
            raise ValueError(f"{_where(_join(path, s.name))} is missing")
        else:
            kwargs[s.name] = _read_value(s.hint, data[s.name], _join(path, s.name), s.values)
            taken.add(s.name)
    rest = [k for k in data if k not in taken]
    if spread is not None:
        item = typing.get_args(spread.hint)[1]
        kwargs[spread.name] = {k: _read_value(item, data[k], _join(path, k)) for k in rest}
        rest = []
    return kwargs, rest


def _keys(cls: type) -> frozenset[str]:
    """The JSON keys a record's own fields (and its inline records') take."""
    out: set[str] = set()
    for s in _SPECS[cls]:
        if s.inline and _is_record(s.hint):
            out |= _keys(s.hint)
        elif not s.inline:
            out.add(s.name)
    return frozenset(out)


_KEYS = {cls: _keys(cls) for cls in _RECORDS}
# Records whose fields are all scalars (read column by column in a list).
_FLAT = frozenset(
    cls
    for cls in _RECORDS
    if all(
        not s.inline and (s.hint is Status or _optional(s.hint)[0] in _SCALARS) for s in _SPECS[cls]
    )
)
_NOUN = {
    PolicyRef: "a policy reference",
    Reason: "a reason",
    CheckSummary: "a check summary",
    SeriesCheck: "a series' check entry",
    SeriesResult: "a series",
    FleetSummary: "the fleet summary",
    AssessmentResult: "an assessment result",
    AssessmentDocument: "an assessment",
}

# Reading a column checks the types of all its values in one pass; only a column that fails is
# read value by value, to name the first value that is off.
_NONE = type(None)
_FAST: dict[Any, frozenset[type]] = {
    str: frozenset({str}),
    int: frozenset({int}),
    float: frozenset({float, int}),
    float | None: frozenset({float, int, _NONE}),
    str | None: frozenset({str, _NONE}),
    int | None: frozenset({int, _NONE}),
    Status: frozenset({str}),
    Any: frozenset({str, int, float, bool, _NONE}),
}


def _read_column(
    hint: Any, column: list[Any], path: Callable[[int], str], values: tuple[str, ...] | None
) -> tuple[Any, ...]:
    """A column of JSON values of type ``hint``, kept as they are (statuses as strings)."""
    fast = _FAST.get(hint)
    if fast is not None and {type(v) for v in column} <= fast:
        if hint is not Status or set(column) <= set(values or _STATUS_VALUES):
            return tuple(column)
    base, optional = _optional(hint)
    for i, v in enumerate(column):
        if not (v is None and optional) and not _scalar_ok(base, v, values):
            raise _off(path(i), v, _describe(hint, values))
    return tuple(column)


def _objects(value: Any, path: Callable[[int], str] | str) -> list[Mapping[str, Any]]:
    """``value`` as a list of objects (``path`` names the list, or each item by position)."""
    if not isinstance(value, list):
        raise _off(str(path), value, "a list")
    if all(type(v) is dict for v in value):  # as JSON decoders give them: the quick test
        return value
    for i, v in enumerate(value):
        if not isinstance(v, Mapping):
            raise _off(path(i) if callable(path) else f"{path}[{i}]", v, "an object")
    return value


def _same_keys(
    rows: list[Mapping[str, Any]],
    keys: frozenset[str],
    path: Callable[[int], str],
    noun: str | None = None,
) -> None:
    """Every row has exactly ``keys`` (the fields of ``noun``, else those of the first row);
    else the first key missing or extra is named."""
    order: tuple[str, ...] | None = None  # the keys of a row found right, in its order
    for i, row in enumerate(rows):
        # Rows usually list their keys in one order: comparing tuples is the quick test.
        listed = tuple(row)
        if listed == order:
            continue
        if row.keys() == keys:
            order = listed
        else:
            missing = sorted(k for k in keys if k not in row)
            if missing:
                raise ValueError(f"{_where(_join(path(i), missing[0]))} is missing")
            extra = next(k for k in row if k not in keys)
            where = _where(_join(path(i), extra))
            if noun is not None:
                raise ValueError(f"{where} is not a field of {noun}")
            raise ValueError(f"{where} is not in {_where(path(0))} (every row has the same fields)")


def _read_flat_records(cls: type, items: list[Any], path: str) -> tuple[Any, ...]:
    """A list of records whose fields are all scalars, read column by column."""
    _objects(items, path)
    if not items:
        return ()

    def at(i: int) -> str:
        return f"{path}[{i}]"

    _same_keys(items, _KEYS[cls], at, _NOUN[cls])
    columns = []
    for s in _SPECS[cls]:
        column = _read_column(
            s.hint,
            list(map(itemgetter(s.name), items)),
            lambda i, f=s.name: _join(at(i), f),
            s.values,
        )
        columns.append([_STATUS_OF[v] for v in column] if s.hint is Status else column)
    return tuple(_made_many(cls, columns))


def _made_many(cls: type, columns: list[Any]) -> Iterator[Any]:
    make = _maker(cls)
    for row in zip(*columns, strict=True):
        yield make(*row)


def _read_table(value: Any, path: str) -> SeriesTable:
    """Series rows as a table: every row with the same sections, and the same checks in the
    same order, as the gate writes them."""
    rows = _objects(value, path)
    if not rows:
        return SeriesTable.empty()

    def at(i: int) -> str:
        return f"{path}[{i}]"

    first = rows[0]
    for f in _SERIES_FIELDS:
        if f != "sections" and f not in first:
            raise ValueError(f"{_where(_join(at(0), f))} is missing")
    _same_keys(rows, frozenset(first), at)
    columns = {
        f: _read_column(
            _SERIES_SPECS[f].hint,
            list(map(itemgetter(f), rows)),
            lambda i, f=f: _join(at(i), f),
            _SERIES_SPECS[f].values,
        )
        for f in _SERIES_COLUMNS
    }
    sections = {
        key: _read_section([r[key] for r in rows], lambda i, key=key: _join(at(i), key))
        for key in first
        if key not in _SERIES_SPECS
    }
    checks = _read_checks([r["checks"] for r in rows], lambda i: _join(at(i), "checks"))
    return SeriesTable(SeriesColumns(**columns, sections=sections, checks=checks))


def _read_object_columns(
    objects: list[Any], at: Callable[[int], str]
) -> dict[str, tuple[Any, ...]]:
    """Objects of JSON scalars, with the same keys, as one column per key."""
    _objects(objects, at)
    _same_keys(objects, frozenset(objects[0]), at)
    return {
        k: _read_column(
            Any, list(map(itemgetter(k), objects)), lambda i, k=k: _join(at(i), k), None
        )
        for k in objects[0]
    }


def _read_section(values: list[Any], at: Callable[[int], str]) -> dict[str, tuple[Any, ...]] | None:
    """A section is ``null`` in every row (its check did not run) or an object in every row."""
    if values[0] is None:
        for i, v in enumerate(values):
            if v is not None:
                raise _off(at(i), v, "null (as in the first row)")
        return None
    return _read_object_columns(values, at)


def _read_checks(lists: list[Any], at: Callable[[int], str]) -> tuple[CheckColumns, ...]:
    """Every row lists the same checks in the same order, each entry with the fields of a
    :class:`SeriesCheck` and the same detail keys in every row."""
    for i, v in enumerate(lists):
        _objects(v, lambda j, i=i: f"{at(i)}[{j}]")
    names = [c.get("name") for c in lists[0]]
    for j, name in enumerate(names):
        if not isinstance(name, str):
            raise _off(_join(f"{at(0)}[{j}]", "name"), name, "a string")
    for i, entries in enumerate(lists):
        if [c.get("name") for c in entries] != names:
            raise ValueError(
                f"{_where(at(i))} lists other checks than {_where(at(0))} (every row lists "
                "the same checks)"
            )
    keys = frozenset(_CHECK_FIELDS)
    out = []
    for j, name in enumerate(names):
        entries = [row[j] for row in lists]

        def where(i: int, j: int = j) -> str:
            return f"{at(i)}[{j}]"

        _same_keys(entries, keys, where, _NOUN[SeriesCheck])
        columns = {
            f: _read_column(
                _CHECK_HINTS[f],
                list(map(itemgetter(f), entries)),
                lambda i, f=f: _join(where(i), f),
                None,
            )
            for f in _CHECK_COLUMNS
        }
        details = _read_object_columns(
            [e["details"] for e in entries], lambda i: _join(where(i), "details")
        )
        out.append(CheckColumns(name=name, **columns, details=details))
    return tuple(out)
