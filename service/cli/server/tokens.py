"""``plumbline tokens create|list|revoke`` straight on the database, with the store's repository.

For a first set-up before any admin token exists: ``--database URL``, or, when no server is
given, ``PLUMBLINE_DATABASE_URL`` or the embedded default. Output and exit codes are those of
the same commands through the API (:mod:`service.cli.tokens`).
"""

from __future__ import annotations

import argparse
import os
import sys
from typing import IO

from ...client import TokenCreated, TokenInfo
from ..errors import CliError, Exit
from ..tokens import run_with
from .admin import database_url


def run(args: argparse.Namespace, out: IO[str] = sys.stdout) -> Exit:
    return run_with(DatabaseTokens(database_url(args)), args, out)


class DatabaseTokens:
    """Tokens straight on the database, with the store's repository functions."""

    def __init__(self, url: str) -> None:
        from sqlalchemy.engine import make_url
        from sqlalchemy.exc import ArgumentError, NoSuchModuleError

        from ...store.engine import make_engine

        self._url = url
        try:
            parsed = make_url(url)
        except (ArgumentError, ValueError) as exc:
            raise CliError(f"--database: cannot use {url!r}: {exc}") from None
        path = parsed.database
        if parsed.get_backend_name() == "sqlite" and path and path != ":memory:":
            if not os.path.exists(path):
                # Opening would leave an empty file behind.
                raise CliError(
                    f"no database at {path}: run 'plumbline db upgrade' first "
                    "(or give --database / PLUMBLINE_DATABASE_URL)"
                )
        try:
            self._engine = make_engine(url)
        except (ArgumentError, NoSuchModuleError, ValueError) as exc:
            raise CliError(f"--database: cannot use {url!r}: {exc}") from None

    def __enter__(self) -> DatabaseTokens:
        from sqlalchemy import inspect
        from sqlalchemy.exc import SQLAlchemyError

        try:
            has_table = inspect(self._engine).has_table("tokens")
        except SQLAlchemyError as exc:
            self._engine.dispose()
            raise CliError(
                f"cannot reach the database: {_first_line(exc)}", Exit.UNREACHABLE
            ) from None
        if not has_table:
            self._engine.dispose()
            raise CliError(
                "the database has no Plumbline tables yet: run 'plumbline db upgrade' first"
            )
        return self

    def __exit__(self, *exc: object) -> None:
        self._engine.dispose()

    def create(self, *, scopes: list[str], label: str) -> TokenCreated:
        from ...store import repository

        stored, secret = repository.create_token(self._engine, scopes=scopes, label=label)
        return TokenCreated(
            id=stored.id, token=secret, label=stored.label, scopes=tuple(stored.scopes)
        )

    def list(self) -> list[TokenInfo]:
        from ...store import repository

        return [
            TokenInfo(
                id=t.id,
                label=t.label,
                scopes=tuple(t.scopes),
                created_at=t.created_at.isoformat(),
                revoked_at=None if t.revoked_at is None else t.revoked_at.isoformat(),
            )
            for t in repository.list_tokens(self._engine)
        ]

    def revoke(self, token_id: str) -> None:
        from ...store import repository

        if not repository.revoke_token(self._engine, token_id=token_id):
            raise CliError(f"no live token with id {token_id!r}")


def _first_line(exc: Exception) -> str:
    text = str(getattr(exc, "orig", None) or exc).strip()
    return text.splitlines()[0] if text else type(exc).__name__
