"""What the records' JSON is made of, and the small machinery shared by their serializer and
their reader: a record's JSON fields, freezing mappings, and functions generated from field
names (as ``dataclasses`` generates ``__init__``)."""

from __future__ import annotations

import dataclasses
import types
import typing
from collections.abc import Callable, Mapping
from dataclasses import dataclass
from functools import cache, lru_cache
from types import MappingProxyType
from typing import Any


@dataclass(frozen=True)
class JsonField:
    """One field of a record as its JSON sees it: the key (``name``), the resolved type
    (``hint``), whether its entries are written into the parent object (``inline``) and, for a
    status, the values it may take (``values``; ``None``: every status)."""

    name: str
    hint: Any
    inline: bool
    values: tuple[str, ...] | None


@cache
def json_fields(cls: type) -> tuple[JsonField, ...]:
    """The JSON fields of a record class, in order (what its ``to_dict`` writes and its
    ``from_dict`` reads; an inline record's fields are its own). Field metadata: ``inline``
    writes the field's entries into the parent object, ``values`` narrows a status and
    ``json=False`` keeps a field out of the JSON."""
    hints = typing.get_type_hints(cls)
    return tuple(
        JsonField(f.name, hints[f.name], bool(f.metadata.get("inline")), f.metadata.get("values"))
        for f in dataclasses.fields(cls)
        if f.metadata.get("json", True)
    )


def optional(hint: Any) -> tuple[Any, bool]:
    """``(X, True)`` for a type ``X | None``, else ``(hint, False)``."""
    if typing.get_origin(hint) in (typing.Union, types.UnionType):
        args = typing.get_args(hint)
        rest = [a for a in args if a is not type(None)]
        if len(rest) == 1 and len(args) == 2:
            return rest[0], True
    return hint, False


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


# The generated functions' globals: _plain and, by class, each serializer made so far.
NAMESPACE: dict[str, Any] = {"_plain": _plain}


def _compile(source: str, name: str) -> Callable[..., Any]:
    namespace = dict(NAMESPACE)
    # The source is made of field names and repr()'d string keys only.
    exec(source, namespace)
    return namespace[name]


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
    namespace: dict[str, Any] = {"_new": object.__new__, "_set": object.__setattr__, "_cls": cls}
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
