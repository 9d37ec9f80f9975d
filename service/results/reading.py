"""Reading a record's JSON back: ``from_dict``, which names the first field that is off.

Lists of records and series rows are read column by column: one pass over a column checks the
types of all its values; only a column that fails is read value by value, to find the first
value that is off."""

from __future__ import annotations

import dataclasses
import typing
from collections.abc import Callable, Iterator, Mapping
from operator import itemgetter
from typing import Any

from ._shape import _maker, json_fields, optional
from .records import (
    _CHECK_COLUMNS,
    _CHECK_FIELDS,
    _SERIES_COLUMNS,
    _SERIES_FIELDS,
    _STATUS_OF,
    AssessmentDocument,
    AssessmentResult,
    CheckColumns,
    CheckSummary,
    FleetSummary,
    PolicyRef,
    Reason,
    SeriesCheck,
    SeriesColumns,
    SeriesResult,
    SeriesTable,
    Status,
)
from .serialize import _RECORDS, _SCALARS, _is_record

_SPECS = {cls: json_fields(cls) for cls in _RECORDS}
_CHECK_HINTS = {s.name: s.hint for s in _SPECS[SeriesCheck]}
_SERIES_SPECS = {s.name: s for s in _SPECS[SeriesResult]}


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
    base, nullable = optional(hint)
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
    return text + (" or null" if nullable else "")


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
    base, nullable = optional(hint)
    if value is None and nullable:
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


def _field_path(at: Callable[[int], str], field: str) -> Callable[[int], str]:
    """The path of ``field`` in the ``i``-th object of ``at``."""
    return lambda i: _join(at(i), field)


def _item_path(at: str) -> Callable[[int], str]:
    """The path of the ``j``-th entry of the list at ``at``."""
    return lambda j: f"{at}[{j}]"


def _read_fields(cls: type, data: Mapping[str, Any], path: str) -> tuple[dict[str, Any], list[str]]:
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
            if s.name in _DEFAULTS[cls]:  # added since older documents were written
                continue
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
# Fields a document may leave out (they were added later), with their defaults.
_DEFAULTS = {
    cls: {
        f.name: f.default for f in dataclasses.fields(cls) if f.default is not dataclasses.MISSING
    }
    for cls in _RECORDS
}
# Records whose fields are all scalars (read column by column in a list).
_FLAT = frozenset(
    cls
    for cls in _RECORDS
    if all(
        not s.inline and (s.hint is Status or optional(s.hint)[0] in _SCALARS) for s in _SPECS[cls]
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
    if fast is not None and set(map(type, column)) <= fast:
        if hint is not Status or set(column) <= set(values or _STATUS_VALUES):
            return tuple(column)
    base, nullable = optional(hint)
    for i, v in enumerate(column):
        if not (v is None and nullable) and not _scalar_ok(base, v, values):
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

    defaults = _DEFAULTS[cls]
    if defaults and any(not row.keys() >= defaults.keys() for row in items):
        # Documents written before a field was added: it takes its default.
        items = [{**defaults, **row} for row in items]
    _same_keys(items, _KEYS[cls], at, _NOUN[cls])
    columns = []
    for s in _SPECS[cls]:
        column = _read_column(
            s.hint,
            list(map(itemgetter(s.name), items)),
            _field_path(at, s.name),
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
            _field_path(at, f),
            _SERIES_SPECS[f].values,
        )
        for f in _SERIES_COLUMNS
    }
    sections = {
        key: _read_section([r[key] for r in rows], _field_path(at, key))
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
        k: _read_column(Any, list(map(itemgetter(k), objects)), _field_path(at, k), None)
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
        _objects(v, _item_path(at(i)))
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
                _field_path(where, f),
                None,
            )
            for f in _CHECK_COLUMNS
        }
        details = _read_object_columns(
            [e["details"] for e in entries], lambda i: _join(where(i), "details")
        )
        out.append(CheckColumns(name=name, **columns, details=details))
    return tuple(out)
