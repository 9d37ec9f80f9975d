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


def work(args: argparse.Namespace, out: IO[str] = sys.stdout) -> Exit:
    """Run the database's background jobs in this process until SIGTERM or SIGINT."""
    import signal
    import threading

    from ...api.jobs import JobRunner
    from ...cluster import job_work
    from ...settings import Settings
    from ...store import StoreUnavailable, make_store

    base = Settings()
    overrides: dict[str, object] = {"database_url": database_url(args)}
    if args.threads is not None:
        overrides["job_workers"] = args.threads
    elif base.job_workers < 1:
        overrides["job_workers"] = 1
    settings = base.model_copy(update=overrides)
    store = make_store(settings.database_url)
    try:
        try:
            ready = store.readiness()
        except StoreUnavailable as exc:
            raise CliError(
                f"cannot reach the database {safe_url(settings.database_url)}: {exc}",
                Exit.UNREACHABLE,
            ) from None
        if not ready.migrated:
            raise CliError(
                f"the database {safe_url(settings.database_url)} is at schema revision "
                f"{ready.schema_revision or 'none'}, this build needs {ready.head_revision}: "
                "run plumbline db upgrade"
            )
        stop = threading.Event()
        previous = {
            sig: signal.signal(sig, lambda *_: stop.set())
            for sig in (signal.SIGTERM, signal.SIGINT)
        }
        work = job_work(settings)
        runner = (
            JobRunner(store, settings) if work is None else JobRunner(store, settings, work=work)
        )
        runner.start()
        out.write(
            f"running background jobs from {safe_url(settings.database_url)} "
            f"in {settings.job_workers} thread(s); SIGTERM or Ctrl-C stops\n"
        )
        out.flush()
        try:
            stop.wait()
        finally:
            runner.stop(timeout=settings.job_lease_seconds)
            for sig, handler in previous.items():
                signal.signal(sig, handler)
    finally:
        store.close()
    out.write("stopped\n")
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
