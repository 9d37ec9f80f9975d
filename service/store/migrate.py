"""Apply the schema migrations shipped inside the package (Alembic)."""

from __future__ import annotations

from functools import lru_cache
from pathlib import Path
from typing import TYPE_CHECKING

from sqlalchemy import Engine

if TYPE_CHECKING:
    from alembic.config import Config

MIGRATIONS = Path(__file__).with_name("migrations")


def _config(url: str) -> Config:  # alembic imported lazily (startup only)
    from alembic.config import Config

    cfg = Config()
    cfg.set_main_option("script_location", str(MIGRATIONS))
    cfg.set_main_option("sqlalchemy.url", url.replace("%", "%%"))
    return cfg


def upgrade_engine(engine: Engine, revision: str = "head") -> None:
    """Bring the database behind ``engine`` to ``revision`` (default: the newest)."""
    from alembic import command

    cfg = _config(engine.url.render_as_string(hide_password=False))
    with engine.begin() as connection:
        cfg.attributes["connection"] = connection
        command.upgrade(cfg, revision)


def upgrade(url: str, revision: str = "head") -> None:
    """Bring the database at ``url`` to ``revision``: what ``plumbline db upgrade`` runs."""
    from .engine import make_engine

    engine = make_engine(url)
    try:
        upgrade_engine(engine, revision)
    finally:
        engine.dispose()


def current_revision(engine: Engine) -> str | None:
    """The revision the database is at (``None`` before the first migration)."""
    from alembic.runtime.migration import MigrationContext

    with engine.connect() as connection:
        return MigrationContext.configure(connection).get_current_revision()


@lru_cache(maxsize=1)
def head_revision() -> str:
    """The newest revision shipped with this package."""
    from alembic.script import ScriptDirectory

    head = ScriptDirectory.from_config(_config("sqlite://")).get_current_head()
    assert head is not None
    return head
