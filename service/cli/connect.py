"""Where the CLI finds its server and token, and how it builds its client."""

from __future__ import annotations

import argparse
import os
import sys

from ..client import JOB_ABOVE_BYTES, PlumblineClient, RetryHook
from .errors import CliError
from .progress import interactive

SERVER_ENV = "PLUMBLINE_SERVER"
TOKEN_ENV = "PLUMBLINE_TOKEN"


def server_from_args(args: argparse.Namespace, *, purpose: str) -> str:
    server = args.server or os.environ.get(SERVER_ENV)
    if not server:
        hint = ", or use --offline" if purpose == "assess against" else ""
        raise CliError(f"no server to {purpose}: pass --server URL or set {SERVER_ENV}{hint}")
    return server


def token_from_args(args: argparse.Namespace) -> str | None:
    return args.token or os.environ.get(TOKEN_ENV) or None


def retry_notice(attempt: int, delay: float, what: str) -> None:
    """Retries explain a delay, so they are reported on stderr even in a CI log."""
    note(f"{what}; retry {attempt} in {delay:.1f}s")


def note(text: str) -> None:
    """One line on stderr, over a spinner's line when there is one."""
    wipe = "\r\033[K" if interactive() else ""
    sys.stderr.write(f"{wipe}plumbline: {text}\n")
    sys.stderr.flush()


def client_from_args(
    args: argparse.Namespace,
    server: str,
    *,
    on_retry: RetryHook | None = retry_notice,
    job_above_bytes: int | None = None,
) -> PlumblineClient:
    """A client for ``server``; ``args.http`` (set by :func:`service.cli.main`'s ``http=``) is an
    ``httpx.Client`` to send through, e.g. Starlette's ``TestClient`` around an in-process app."""
    try:
        return PlumblineClient(
            server,
            token=token_from_args(args),
            http=getattr(args, "http", None),
            timeout=args.timeout,
            retries=args.retries,
            on_retry=on_retry,
            job_above_bytes=JOB_ABOVE_BYTES if job_above_bytes is None else job_above_bytes,
        )
    except ValueError as exc:
        raise CliError(f"--server: {exc}") from None
