"""The database engine, made from an SQLAlchemy URL by :func:`make_engine`."""

from __future__ import annotations

from typing import Any

from sqlalchemy import Engine, create_engine, event
from sqlalchemy.engine import make_url

SQLITE_BUSY_TIMEOUT_MS = 10_000
POSTGRES_CONNECT_TIMEOUT_SECONDS = 5
"""How long a new PostgreSQL connection may take (libpq's ``connect_timeout``): without it a
server whose packets are dropped holds a connection attempt for the operating system's TCP
timeout, minutes, and with it the worker. A ``connect_timeout`` in the URL wins."""


def _sqlite_pragmas(dbapi_connection: Any, _record: Any) -> None:
    cursor = dbapi_connection.cursor()
    try:
        # WAL lets readers run beside one writer, so several workers can share the file;
        # synchronous=NORMAL is durable across process crashes in WAL mode.
        cursor.execute("PRAGMA journal_mode=WAL")
        cursor.execute("PRAGMA synchronous=NORMAL")
        cursor.execute(f"PRAGMA busy_timeout={SQLITE_BUSY_TIMEOUT_MS}")
        cursor.execute("PRAGMA foreign_keys=ON")
    finally:
        cursor.close()


def make_engine(url: str, **kwargs: Any) -> Engine:
    """An engine for ``url``: SQLite (WAL mode, busy timeout, foreign keys on) or PostgreSQL
    (connections checked before use, a connect timeout).

    A plain ``postgresql://`` URL is given the psycopg 3 driver.
    """
    parsed = make_url(url)
    backend = parsed.get_backend_name()
    if backend == "sqlite":
        connect_args = dict(kwargs.pop("connect_args", {}))
        # Connections move between the request threads of the server's pool.
        connect_args.setdefault("check_same_thread", False)
        connect_args.setdefault("timeout", SQLITE_BUSY_TIMEOUT_MS / 1000)
        engine = create_engine(parsed, connect_args=connect_args, **kwargs)
        event.listen(engine, "connect", _sqlite_pragmas)
        return engine
    if backend == "postgresql":
        if parsed.get_driver_name() in ("", "psycopg2", "postgresql"):
            parsed = parsed.set(drivername="postgresql+psycopg")
        kwargs.setdefault("pool_pre_ping", True)
        connect_args = dict(kwargs.pop("connect_args", {}))
        if "connect_timeout" not in parsed.query:
            connect_args.setdefault("connect_timeout", POSTGRES_CONNECT_TIMEOUT_SECONDS)
        return create_engine(parsed, connect_args=connect_args, **kwargs)
    raise ValueError(
        f"unsupported database URL scheme {parsed.drivername!r}: use sqlite:/// or "
        "postgresql+psycopg://"
    )
