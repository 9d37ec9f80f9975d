"""The one serializer of the records: each record's ``to_dict`` generated from its fields, and
:func:`to_dicts`, which builds the series rows of stacked parts in one pass."""

from __future__ import annotations

import typing
from collections.abc import Callable, Mapping, Sequence
from typing import Any

from ._shape import NAMESPACE, _compile, json_fields, optional
from .records import (
    AssessmentDocument,
    AssessmentResult,
    CheckSummary,
    FleetSummary,
    PolicyRef,
    Reason,
    SeriesCheck,
    SeriesColumns,
    SeriesResult,
    SeriesTable,
    Status,
    _Record,
)

_SCALARS = (str, int, float, bool)


def _is_record(hint: Any) -> bool:
    return isinstance(hint, type) and issubclass(hint, _Record)


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
    if optional(hint)[0] in _SCALARS:
        return access
    raise TypeError(f"no JSON form for {hint!r}")


def _serializer(cls: type) -> Callable[[Any, Callable[[SeriesTable], list[Any]]], dict[str, Any]]:
    """``to_dict(record, rows)``: ``rows(table)`` gives the JSON rows of a series table."""
    entries = []
    for s in json_fields(cls):
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
    _TO_DICT[_cls] = NAMESPACE[f"_to_dict_{_cls.__name__}"] = _serializer(_cls)
del _cls
