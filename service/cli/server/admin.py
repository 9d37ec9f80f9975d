"""``plumbline serve`` and ``plumbline db upgrade``, and where the database is."""

from __future__ import annotations

import argparse
import sys
from typing import IO

from ..errors import CliError, Exit


def database_url(args: argparse.Namespace) -> str:
    """``--database``, else the service settings (``PLUMBLINE_DATABASE_URL`` or the default)."""
    if getattr(args, "database", None):
        return args.database
    from ...settings import Settings

    return Settings().database_url


def serve(args: argparse.Namespace, out: IO[str] = sys.stdout) -> Exit:
    from ...api.server import run

    run(host=args.host, port=args.port, workers=args.workers)
    return Exit.PASSES


def db_upgrade(args: argparse.Namespace, out: IO[str] = sys.stdout) -> Exit:
    from sqlalchemy.exc import ArgumentError, NoSuchModuleError, SQLAlchemyError

    from ...store.migrate import upgrade

    url = database_url(args)
    try:
        upgrade(url)
    except (ArgumentError, NoSuchModuleError) as exc:
        raise CliError(f"--database: cannot use {safe_url(url)!r}: {exc}") from None
    except SQLAlchemyError as exc:
        text = str(getattr(exc, "orig", None) or exc).strip().splitlines()
        raise CliError(
            f"cannot reach the database {safe_url(url)}: {text[0] if text else type(exc).__name__}",
            Exit.UNREACHABLE,
        ) from None
    out.write(f"database upgraded: {safe_url(url)}\n")
    return Exit.PASSES


def safe_url(url: str) -> str:
    """The URL with any password hidden."""
    from urllib.parse import urlsplit, urlunsplit

    parts = urlsplit(url)
    if parts.password is None:
        return url
    netloc = parts.netloc.replace(f":{parts.password}@", ":***@")
    return urlunsplit(parts._replace(netloc=netloc))
