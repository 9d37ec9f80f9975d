"""``plumbline tokens create|list|revoke`` through the API, and what both ways print.

The command calls ``/v1/tokens`` on ``--server`` with an admin token. With ``--database URL``
(or when no server is given) it works on the database itself, for a first set-up before any
admin token exists: :func:`on_database` tells which, and the server side of the command
(:mod:`service.cli.server.tokens`) does that work with the same output.
"""

from __future__ import annotations

import argparse
import os
import sys
from typing import IO, Any

from ..client import TokenCreated, TokenInfo
from . import render
from .connect import SERVER_ENV, client_from_args, server_from_args
from .errors import CliError, Exit


def on_database(args: argparse.Namespace) -> bool:
    """Whether the command works on the database (``--database``, or no server given)."""
    if args.database:
        if args.server:
            raise CliError("--database and --server exclude each other")
        return True
    return not (args.server or os.environ.get(SERVER_ENV))


def run(args: argparse.Namespace, out: IO[str] = sys.stdout) -> Exit:
    """Through the API on ``--server`` (or ``PLUMBLINE_SERVER``)."""
    return run_with(ApiTokens(args), args, out)


def run_with(backend: Any, args: argparse.Namespace, out: IO[str]) -> Exit:
    """The action of ``args`` on ``backend`` (tokens through the API or on the database)."""
    action = args.tokens_command
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
        server = server_from_args(args, purpose="manage tokens on")
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
