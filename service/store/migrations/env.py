"""Alembic environment: runs on the connection handed over by :mod:`service.store.migrate`."""

from __future__ import annotations

from alembic import context

from service.store.models import Base

config = context.config
target_metadata = Base.metadata


def run_migrations_online() -> None:
    connection = config.attributes.get("connection")
    if connection is None:
        from service.store.engine import make_engine

        url = config.get_main_option("sqlalchemy.url")
        if url is None:
            raise RuntimeError("alembic: no sqlalchemy.url and no connection given")
        engine = make_engine(url)
        with engine.begin() as conn:
            context.configure(
                connection=conn, target_metadata=target_metadata, render_as_batch=True
            )
            with context.begin_transaction():
                context.run_migrations()
        engine.dispose()
        return
    context.configure(connection=connection, target_metadata=target_metadata, render_as_batch=True)
    with context.begin_transaction():
        context.run_migrations()


if context.is_offline_mode():
    raise SystemExit("offline migrations are not supported: run them against a database")
run_migrations_online()
