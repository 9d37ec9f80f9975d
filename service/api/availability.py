"""When the database cannot be reached or written: 503 with ``Retry-After``, then recovery.

* :func:`is_unavailable` tells an outage (the server is gone, refuses connections, the SQLite
  file is read-only or its disk fails, a lock or pool wait timed out) from a bug or a constraint
  violation, which stay errors of their own.
* :func:`install_availability` maps outages (met through SQLAlchemy or straight on the DBAPI
  connection, as the hot path of saving does) to ``503 application/problem+json`` with
  ``Retry-After`` (nothing was stored: the client may retry, with the same ``Idempotency-Key``),
  and makes the engine drop a connection that met an outage. SQLite opens a connection read-only
  when the file is not writable and keeps it so: without dropping it the service would refuse
  writes long after the file is writable again.
* :func:`probe_database` is the readiness check: a round trip, and for SQLite a write that is
  committed (a read-only file answers ``SELECT 1`` as well as a writable one).
"""

from __future__ import annotations

import logging
from typing import Any

from sqlalchemy import Engine, event, text
from sqlalchemy.exc import (
    DBAPIError,
    DisconnectionError,
    InterfaceError,
    OperationalError,
    SQLAlchemyError,
)
from sqlalchemy.exc import TimeoutError as PoolTimeoutError

__all__ = [
    "RETRY_AFTER_SECONDS",
    "install_availability",
    "is_unavailable",
    "probe_database",
]

RETRY_AFTER_SECONDS = 5
"""What ``Retry-After`` says while the database is unavailable."""

log = logging.getLogger("plumbline.api")

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


def _sqlite_outage(original: BaseException | None) -> bool:
    name = getattr(original, "sqlite_errorname", None)
    return isinstance(name, str) and name.startswith(_SQLITE_OUTAGE_PREFIXES)


def _raw_error_types() -> tuple[type[BaseException], ...]:
    """The DBAPI drivers' own error bases (the hot path runs on the DBAPI connection)."""
    import sqlite3

    found: list[type[BaseException]] = [sqlite3.Error]
    try:
        import psycopg
    except ImportError:  # pragma: no cover - installed with the service
        pass
    else:
        found.append(psycopg.Error)
    return tuple(found)


def _raw_outage(exc: BaseException) -> bool:
    import sqlite3

    if isinstance(exc, sqlite3.Error):
        return _sqlite_outage(exc)
    try:
        import psycopg
    except ImportError:  # pragma: no cover
        return False
    return isinstance(exc, psycopg.OperationalError | psycopg.InterfaceError)


def is_unavailable(exc: BaseException) -> bool:
    """Whether ``exc`` means the database is unavailable (retry later), not a bug."""
    if not isinstance(exc, SQLAlchemyError):
        return _raw_outage(exc)
    if isinstance(exc, DBAPIError):
        original = exc.orig
        if getattr(original, "sqlite_errorname", None) is not None:
            return _sqlite_outage(original)
        return isinstance(exc, OperationalError | InterfaceError) or exc.connection_invalidated
    return isinstance(exc, _OUTAGE_TYPES)


def _drop_broken_connections(context: Any) -> None:
    """``handle_error`` hook: treat an SQLite outage like a lost connection (pool discarded)."""
    if context.engine is not None and context.engine.dialect.name == "sqlite":
        if _sqlite_outage(context.original_exception):
            context.is_disconnect = True


def probe_database(engine: Engine) -> None:
    """Raise if the database cannot be read, or (SQLite) written; return quietly when ready."""
    with engine.connect() as conn:
        conn.execute(text("SELECT 1"))
        if engine.dialect.name == "sqlite":
            # Rewrite the header's user_version with its own value: a committed write that
            # changes nothing, refused at once by a read-only file or a failing disk.
            version = conn.execute(text("PRAGMA user_version")).scalar_one()
            conn.execute(text(f"PRAGMA user_version = {int(version)}"))
            conn.commit()


def install_availability(app: Any) -> None:
    """Register the 503 mapping on ``app`` and the connection hook on ``app.state.engine``."""
    from .errors import problem

    engine: Engine = app.state.engine
    if not event.contains(engine, "handle_error", _drop_broken_connections):
        event.listen(engine, "handle_error", _drop_broken_connections)

    async def unavailable(request: Any, exc: Exception) -> Any:
        if not is_unavailable(exc):
            log.error("database error on %s %s", request.method, request.url.path, exc_info=exc)
            return problem(
                500, "internal error: the service failed on this request; it has been logged"
            )
        code = getattr(getattr(exc, "orig", None), "sqlite_errorname", None)
        log.warning(
            "database unavailable on %s %s: %s%s",
            request.method,
            request.url.path,
            type(exc).__name__,
            f" ({code})" if code else "",
        )
        return problem(
            503,
            "The database is unavailable; nothing was stored. Retry after the number of "
            "seconds in the Retry-After header (with the same Idempotency-Key).",
            slug="database-unavailable",
            headers={"Retry-After": str(RETRY_AFTER_SECONDS)},
        )

    async def raw_unavailable(request: Any, exc: Exception) -> Any:
        if is_unavailable(exc):
            # Met outside SQLAlchemy's execution layer, so no connection was dropped: drop the
            # pooled ones (an SQLite connection opened read-only stays read-only).
            engine.dispose()
        return await unavailable(request, exc)

    app.add_exception_handler(SQLAlchemyError, unavailable)
    for error_type in _raw_error_types():
        app.add_exception_handler(error_type, raw_unavailable)
