"""The ``plumbline`` commands that work on the server's own database, apart from the HTTP client.

``serve`` (run the service), ``work`` (run its background jobs), ``db upgrade`` (apply the
migrations) and ``tokens`` with ``--database`` (or no server given: a first set-up before any
admin token exists). They use the
store and the API; the client side of the command (``service.cli``) imports neither, and
imports this package only to run one of these commands.
"""

from __future__ import annotations

import argparse
from typing import IO

from ..errors import CliError, Exit


def run(args: argparse.Namespace, out: IO[str]) -> Exit:
    """Run the server-side command ``args`` names."""
    if args.command == "serve":
        from .admin import serve

        return serve(args, out)
    if args.command == "work":
        from .admin import work

        return work(args, out)
    if args.command == "db":
        from .admin import db_upgrade

        return db_upgrade(args, out)
    if args.command == "tokens":
        from .tokens import run as run_tokens

        return run_tokens(args, out)
    raise CliError(f"{args.command!r} is not a command on the database")  # dispatch sends none
