"""The hot path's statements, compiled once per dialect and run on the DBAPI connection.

Saving an assessment happens on every POST; going through SQLAlchemy's execution layer costs
more than the database work itself for a one-series assessment. Here the same Core statements
are compiled once for the engine's dialect (so the SQL and parameter style are SQLAlchemy's) and
executed on the pooled DBAPI connection, with SQLAlchemy's own bind processors for the types that
need one (date-times on SQLite), so rows read back through SQLAlchemy exactly as if it had
written them.
"""

from __future__ import annotations

import weakref
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass
from typing import Any

from sqlalchemy import Engine, Table, bindparam, insert, select

from .models import (
    AssessmentRow,
    IdempotencyKeyRow,
    PolicyRow,
    SeriesInputRow,
    SeriesResultRow,
    table_of,
)


@dataclass(frozen=True)
class Statement:
    sql: str
    keys: tuple[str, ...]
    positional: bool
    processors: Mapping[str, Any]
    defaults: Mapping[str, Any]

    def params(self, values: Mapping[str, Any]) -> Sequence[Any] | dict[str, Any]:
        if self.defaults:  # parameters the statement binds itself (OFFSET 0 on SQLite)
            values = {**self.defaults, **values}
        if self.processors:
            values = {
                k: (self.processors[k](v) if k in self.processors and v is not None else v)
                for k, v in values.items()
            }
        if self.positional:
            return [values[k] for k in self.keys]
        return {k: values[k] for k in self.keys}


def _compile(
    engine: Engine,
    stmt: Any,
    table: Table,
    keys: Sequence[str],
    types: Mapping[str, Any] | None = None,
) -> Statement:
    compiled = stmt.compile(dialect=engine.dialect, column_keys=list(keys))
    order = compiled.positiontup
    processors = {}
    for key in keys:
        # A key named after a column binds as the column's type; ``types`` gives the others'.
        kind = table.c[key].type if key in table.c else (types or {}).get(key)
        if kind is not None:
            proc = kind.dialect_impl(engine.dialect).bind_processor(engine.dialect)
            if proc is not None:
                processors[key] = proc
    defaults = {k: v for k, v in compiled.params.items() if k not in keys}
    return Statement(
        sql=str(compiled),
        keys=tuple(order) if order else tuple(compiled.params),
        positional=order is not None,
        processors=processors,
        defaults=defaults,
    )


class Statements:
    """The compiled statements for one engine."""

    def __init__(self, engine: Engine) -> None:
        a, sr, si, k = (
            table_of(AssessmentRow),
            table_of(SeriesResultRow),
            table_of(SeriesInputRow),
            table_of(IdempotencyKeyRow),
        )
        p = table_of(PolicyRow)
        a_keys = [c.name for c in a.c if c.name != "seq"]
        self.insert_assessment = _compile(engine, insert(a).returning(a.c.seq), a, a_keys)
        self.insert_series_result = _compile(engine, insert(sr), sr, [c.name for c in sr.c])
        self.insert_series_input = _compile(engine, insert(si), si, [c.name for c in si.c])
        self.insert_key = _compile(engine, insert(k), k, [c.name for c in k.c])
        latest = (
            select(p.c.version, p.c.document)
            .where(p.c.name == bindparam("name"))
            .order_by(p.c.version.desc())
            .limit(bindparam("one"))
        )
        self.latest_policy = _compile(engine, latest, p, ["name", "one"])
        dbapi = engine.dialect.dbapi
        if dbapi is None:
            raise RuntimeError(f"no DB-API module for the {engine.dialect.name} dialect")
        self.integrity_error = dbapi.IntegrityError


_CACHE: weakref.WeakKeyDictionary[Engine, Statements] = weakref.WeakKeyDictionary()


compile_statement = _compile
"""Compile a statement of another module for :func:`run_in_transaction` work."""


def statements(engine: Engine) -> Statements:
    found = _CACHE.get(engine)
    if found is None:
        found = _CACHE[engine] = Statements(engine)
    return found


def run_in_transaction(engine: Engine, work: Any) -> Any:
    """Call ``work(cursor)`` inside one transaction on a pooled DBAPI connection."""
    raw = engine.raw_connection()
    try:
        cursor = raw.cursor()
        try:
            out = work(cursor)
        finally:
            cursor.close()
        raw.commit()
        return out
    except BaseException:
        raw.rollback()
        raise
    finally:
        raw.close()


def run_read(engine: Engine, work: Any) -> Any:
    """Call ``work(cursor)`` on a pooled DBAPI connection for reading (nothing to commit; the
    pool rolls the connection back when it is returned)."""
    raw = engine.raw_connection()
    try:
        cursor = raw.cursor()
        try:
            return work(cursor)
        finally:
            cursor.close()
    finally:
        raw.close()


def executemany(cursor: Any, stmt: Statement, rows: Iterable[Mapping[str, Any]]) -> None:
    params = [stmt.params(r) for r in rows]
    if params:
        cursor.executemany(stmt.sql, params)
