"""``plumbline tokens create|list|revoke``: through the API, or straight on the database.

With ``--database URL`` (or, when no server is given, ``PLUMBLINE_DATABASE_URL`` or the
embedded default) the command works on the database itself, for a first set-up before any
admin token exists; otherwise it calls ``/v1/tokens`` on ``--server`` with an admin token.
"""

from __future__ import annotations

import argparse
import os
import sys
from typing import IO, Any

from ..client import TokenCreated, TokenInfo
from . import render
from .admin import database_url
from .connect import SERVER_ENV, client_from_args
from .errors import CliError, Exit


def _use_database(args: argparse.Namespace) -> bool:
    if args.database:
        if args.server:
            raise CliError("--database and --server exclude each other")
        return True
    return not (args.server or os.environ.get(SERVER_ENV))


def run(args: argparse.Namespace, out: IO[str] = sys.stdout) -> Exit:
    action = args.tokens_command
    if _use_database(args):
        backend: Any = DatabaseTokens(database_url(args))
    else:
        backend = ApiTokens(args)
    with backend:
        if action == "create":
            created = backend.create(scopes=_unique(args.scopes), label=args.label)
            _print_created(created, out, as_json=args.json)
        elif action == "list":
            _print_list(backend.list(), out, as_json=args.json)
        else:
            backend.revoke(args.token_id)
            if args.json:
                render.dump_json({"id": args.token_id, "revoked": True}, out)
            else:
                out.write(f"token {args.token_id} revoked\n")
    return Exit.PASSES


def _unique(scopes: list[str]) -> list[str]:
    return list(dict.fromkeys(scopes))


def _print_created(created: TokenCreated, out: IO[str], *, as_json: bool) -> None:
    if as_json:
        render.dump_json(
            {
                "id": created.id,
                "token": created.token,
                "label": created.label,
                "scopes": list(created.scopes),
            },
            out,
        )
        return
    out.write(
        f"token {created.id} ({', '.join(created.scopes)}; label {created.label!r}):\n"
        f"{created.token}\n"
        "This secret is shown once; store it now (e.g. as PLUMBLINE_TOKEN in your CI secrets).\n"
    )


def _print_list(tokens: list[TokenInfo], out: IO[str], *, as_json: bool) -> None:
    if as_json:
        render.dump_json(
            {
                "items": [
                    {
                        "id": t.id,
                        "label": t.label,
                        "scopes": list(t.scopes),
                        "created_at": t.created_at,
                        "revoked_at": t.revoked_at,
                    }
                    for t in tokens
                ]
            },
            out,
        )
        return
    if not tokens:
        out.write("no tokens\n")
        return
    rows = [("id", "label", "scopes", "created", "revoked")] + [
        (t.id, t.label or "", ",".join(t.scopes), t.created_at or "", t.revoked_at or "-")
        for t in tokens
    ]
    widths = [max(len(r[i]) for r in rows) for i in range(5)]
    for row in rows:
        out.write("  ".join(f"{c:<{w}}" for c, w in zip(row, widths, strict=True)).rstrip())
        out.write("\n")


class ApiTokens:
    """Tokens through ``/v1/tokens`` (needs an admin token)."""

    def __init__(self, args: argparse.Namespace) -> None:
        server = args.server or os.environ.get(SERVER_ENV)
        self._client = client_from_args(args, server)

    def __enter__(self) -> ApiTokens:
        return self

    def __exit__(self, *exc: object) -> None:
        self._client.close()

    def create(self, *, scopes: list[str], label: str) -> TokenCreated:
        return self._client.create_token(scopes=scopes, label=label)

    def list(self) -> list[TokenInfo]:
        return self._client.list_tokens()

    def revoke(self, token_id: str) -> None:
        self._client.revoke_token(token_id)


class DatabaseTokens:
    """Tokens straight on the database, with the store's repository functions."""

    def __init__(self, url: str) -> None:
        from sqlalchemy.engine import make_url
        from sqlalchemy.exc import ArgumentError, NoSuchModuleError

        from ..store.engine import make_engine

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
        from ..store import repository

        stored, secret = repository.create_token(self._engine, scopes=scopes, label=label)
        return TokenCreated(
            id=stored.id, token=secret, label=stored.label, scopes=tuple(stored.scopes)
        )

    def list(self) -> list[TokenInfo]:
        from ..store import repository

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
        from ..store import repository

        if not repository.revoke_token(self._engine, token_id=token_id):
            raise CliError(f"no live token with id {token_id!r}")


def _first_line(exc: Exception) -> str:
    text = str(getattr(exc, "orig", None) or exc).strip()
    return text.splitlines()[0] if text else type(exc).__name__
