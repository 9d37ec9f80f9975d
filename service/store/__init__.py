"""Storage: the :class:`Store` port the API talks to, its SQLAlchemy implementation made from a
URL by :func:`make_store`, the engine, ORM models, repository functions and migrations."""

from .engine import make_engine
from .port import (
    IdempotencyConflict,
    Readiness,
    Store,
    StoreConflict,
    StoreError,
    StoreUnavailable,
)
from .sql import SqlStore, make_store

__all__ = [
    "IdempotencyConflict",
    "Readiness",
    "SqlStore",
    "Store",
    "StoreConflict",
    "StoreError",
    "StoreUnavailable",
    "make_engine",
    "make_store",
]
