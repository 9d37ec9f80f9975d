"""The ``plumbline`` command: assess files, gate deployments, manage tokens, run the service.

Two sides. The client side, this package, talks to a server over HTTP (``assess``,
``verdict``, ``tokens``) or computes in-process with ``service.core`` and ``service.ingest``
(``assess --offline``, ``demo``); it imports neither the store nor the API. The server side,
:mod:`service.cli.server`, works on the server's own database (``serve``, ``db upgrade``,
``tokens`` on the database) and is imported only to run one of those commands.

Kept light to import: the statistics core is imported only by ``--offline`` and ``demo``, the
web stack and the database only by the server side.
"""

from __future__ import annotations

import sys
from collections.abc import Sequence
from typing import IO, Any

from .errors import CliError, Exit

__all__ = ["Exit", "main"]


def main(argv: Sequence[str] | None = None, *, http: Any = None) -> int:
    """Run the command line; returns the exit code.

    ``http`` is an ``httpx.Client`` that server commands send through (for instance Starlette's
    ``TestClient`` around an app in the same process); by default they open their own.
    """
    from ..client import RequestRejected, ServerError, ServerUnreachable
    from .parser import build_parser

    out, err = sys.stdout, sys.stderr
    parser = build_parser()
    try:
        args = parser.parse_args(argv)
    except SystemExit as exc:  # --help, --version, usage errors (already printed)
        return int(exc.code or 0)
    args.http = http
    try:
        return int(_dispatch(args, out))
    except CliError as exc:
        err.write(f"plumbline: error: {exc.message}\n")
        return int(exc.code)
    except RequestRejected as exc:
        err.write(f"plumbline: error: request refused: {_hint(exc, args)}\n")
        return int(Exit.USAGE)
    except (ServerUnreachable, ServerError) as exc:
        err.write(f"plumbline: error: {exc}\n")
        return int(Exit.UNREACHABLE)
    except BrokenPipeError:
        # The reader of stdout went away; the command itself finished what it had to do.
        from .render import silence_stdout

        silence_stdout()
        return int(getattr(args, "exit_code", Exit.PASSES))
    except KeyboardInterrupt:
        err.write("plumbline: interrupted\n")
        return 130


def _hint(exc: Any, args: Any) -> str:
    text = exc.summary()
    if exc.status == 401:
        from .connect import token_from_args

        given = getattr(args, "token", None) is not None or token_from_args(args) is not None
        if not given:
            text += " (no token given: pass --token or set PLUMBLINE_TOKEN)"
    elif exc.status == 403 and "scope" not in text:
        text += " (the token lacks the scope this needs)"
    return text


SERVER_COMMANDS = frozenset({"serve", "db", "work"})
"""Commands that always work on the server's own database."""


def _dispatch(args: Any, out: IO[str]) -> int:
    if args.command in SERVER_COMMANDS or (args.command == "tokens" and _tokens_on_database(args)):
        from .server import run as run_on_server

        return run_on_server(args, out)
    if args.command == "assess":
        from .assess import run

        return run(args, out)
    if args.command == "verdict":
        from .verdict import run

        return run(args, out)
    if args.command == "tokens":
        from .tokens import run

        return run(args, out)
    if args.command == "demo":
        from ..demo import run_demo

        return run_demo(args.directory, out)
    raise CliError(f"unknown command {args.command!r}")  # argparse rejects it first


def _tokens_on_database(args: Any) -> bool:
    from .tokens import on_database

    return on_database(args)
