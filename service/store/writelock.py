"""One writer at a time on an SQLite file, across threads and worker processes, without polling.

SQLite lets one writer in at a time and makes the others poll: each waiting connection sleeps
and retries (up to 100 ms between tries) until its busy timeout. Under many concurrent
submissions from several workers that polling is unfair: an unlucky writer can lose every race
for seconds and end with ``database is locked``. :func:`write_lock` makes writers wait in line
on an advisory file lock beside the database instead (``flock``, a blocking wait the kernel
ends as soon as the lock is free), so SQLite's own lock is never contended by writers. The
kernel drops the lock when its holder dies, even by SIGKILL. PostgreSQL (row locks, no file)
needs none: there it is a no-op.
"""

from __future__ import annotations

import os
from collections.abc import Iterator
from contextlib import contextmanager

from sqlalchemy import Engine

try:
    import fcntl
except ImportError:  # pragma: no cover - not POSIX: SQLite's busy timeout alone
    fcntl = None  # type: ignore[assignment]

__all__ = ["write_lock"]


def _lock_path(engine: Engine) -> str | None:
    if engine.dialect.name != "sqlite" or fcntl is None:
        return None
    database = engine.url.database
    if not database or database == ":memory:" or database.startswith("file:"):
        return None
    return os.path.abspath(database) + ".writelock"


@contextmanager
def write_lock(engine: Engine) -> Iterator[None]:
    """Hold the database's write lock (SQLite files only) for the ``with`` block."""
    path = _lock_path(engine)
    fd = -1
    if path is not None:
        try:
            fd = os.open(path, os.O_RDWR | os.O_CREAT, 0o600)
        except OSError:
            fd = -1  # a read-only folder: the write itself will tell what is wrong
    try:
        if fd >= 0:
            fcntl.flock(fd, fcntl.LOCK_EX)
        yield
    finally:
        if fd >= 0:
            os.close(fd)  # closing releases the lock
