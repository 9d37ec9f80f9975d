"""Telling an outage of the database from a bug, for the errors of one engine.

:class:`DriverErrors` knows the errors an engine can raise: SQLAlchemy's own, met through its
execution layer, and its DBAPI driver's (``sqlite3``, ``psycopg``), met straight on a pooled
connection as the hot path of saving does. :meth:`DriverErrors.is_outage` says whether one of
them means the database is unavailable (the server is gone, refuses connections, the SQLite file
is read-only or its disk fails, a lock or pool wait timed out), not a bad statement or a broken
constraint, which stay errors of their own.

:func:`drop_broken_connections` is the engine's ``handle_error`` hook: SQLite opens a connection
read-only when the file is not writable and keeps it so; treated like a lost connection, it is
discarded with its pool, so the store takes writes again as soon as the file is writable.
"""

from __future__ import annotations

from typing import Any

from sqlalchemy import Engine
from sqlalchemy.exc import (
    DBAPIError,
    DisconnectionError,
    InterfaceError,
    OperationalError,
    SQLAlchemyError,
)
from sqlalchemy.exc import TimeoutError as PoolTimeoutError

__all__ = ["DriverErrors", "drop_broken_connections", "sqlite_code"]

# SQLite result codes (by name) that mean the file cannot be written now, not a bad statement.
_SQLITE_OUTAGE_PREFIXES = (
    "SQLITE_READONLY",
    "SQLITE_IOERR",
    "SQLITE_CANTOPEN",
    "SQLITE_FULL",
    "SQLITE_BUSY",
    "SQLITE_LOCKED",
)
_OUTAGE_TYPES = (OperationalError, InterfaceError, DisconnectionError, PoolTimeoutError)


def sqlite_code(exc: BaseException | None) -> str | None:
    """The SQLite result code's name (``"SQLITE_READONLY"``) of an error, raw or wrapped."""
    name = getattr(exc, "sqlite_errorname", None)
    if name is None and isinstance(exc, DBAPIError):
        name = getattr(exc.orig, "sqlite_errorname", None)
    return name if isinstance(name, str) else None


def _sqlite_outage(exc: BaseException | None) -> bool:
    name = getattr(exc, "sqlite_errorname", None)
    return isinstance(name, str) and name.startswith(_SQLITE_OUTAGE_PREFIXES)


class DriverErrors:
    """The errors ``engine`` can raise, and which of them are outages."""

    def __init__(self, engine: Engine) -> None:
        dbapi = engine.dialect.dbapi
        self._sqlite = engine.dialect.name == "sqlite"
        named = (getattr(dbapi, name, None) for name in ("OperationalError", "InterfaceError"))
        self._raw_outage_types: tuple[type[BaseException], ...] = tuple(
            t for t in named if isinstance(t, type)
        )
        raw = getattr(dbapi, "Error", None)
        self.types: tuple[type[BaseException], ...] = (SQLAlchemyError,) + (
            (raw,) if isinstance(raw, type) else ()
        )
        """What to catch: SQLAlchemy's errors and the driver's own (PEP 249 ``Error``)."""

    @staticmethod
    def is_raw(exc: BaseException) -> bool:
        """Whether ``exc`` was met outside SQLAlchemy's execution layer (no connection of the
        pool was dropped for it)."""
        return not isinstance(exc, SQLAlchemyError)

    def is_outage(self, exc: BaseException) -> bool:
        """Whether ``exc`` means the database is unavailable (retry later), not a bug."""
        if isinstance(exc, DBAPIError):
            original = exc.orig
            if getattr(original, "sqlite_errorname", None) is not None:
                return _sqlite_outage(original)
            return isinstance(exc, OperationalError | InterfaceError) or exc.connection_invalidated
        if isinstance(exc, SQLAlchemyError):
            return isinstance(exc, _OUTAGE_TYPES)
        if self._sqlite:  # sqlite3 tells an outage by its result code alone
            return _sqlite_outage(exc)
        return isinstance(exc, self._raw_outage_types)


def drop_broken_connections(context: Any) -> None:
    """``handle_error`` hook: treat an SQLite outage like a lost connection (pool discarded)."""
    if context.engine is not None and context.engine.dialect.name == "sqlite":
        if _sqlite_outage(context.original_exception):
            context.is_disconnect = True
