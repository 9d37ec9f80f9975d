"""Storage: the engine made from a URL, ORM models, repository functions and migrations."""

from .engine import make_engine

__all__ = ["make_engine"]
