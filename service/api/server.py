"""Running the service under uvicorn: what ``plumbline serve`` calls."""

from __future__ import annotations

import argparse
import sys
from typing import TYPE_CHECKING

from service.settings import Settings

if TYPE_CHECKING:
    from fastapi import FastAPI


def prepare(settings: Settings) -> str | None:
    """Migrate the database and, on a first start with no token anywhere, mint an admin token.

    Returns the new token's secret (``None`` when one already existed or
    ``PLUMBLINE_ADMIN_TOKEN`` is set).
    """
    from service.api.auth import ensure_first_token
    from service.store import make_store

    store = make_store(settings.database_url)
    try:
        store.migrate()
        return ensure_first_token(store, settings)
    finally:
        store.close()


def run(host: str, port: int, workers: int) -> None:
    """Serve the app of :func:`worker_app` under uvicorn, from the environment's settings.

    Migrations run once here, before the workers start (they then skip them).
    """
    import uvicorn

    from service.api.auth import announce_first_token
    from service.api.slowclients import uvicorn_options

    settings = Settings()
    announce_first_token(prepare(settings))
    uvicorn.run(
        "service.api.server:worker_app",
        factory=True,
        host=host,
        port=port,
        workers=max(1, workers),
        log_level="info",
        access_log=False,
        proxy_headers=False,
        **uvicorn_options(settings),
    )


def worker_app() -> FastAPI:
    """The app of one worker started by :func:`run` (uvicorn calls it in each worker process).

    Its settings are the environment's, which every worker inherits unchanged from the process
    that called :func:`run` and read its own from, with the migrations and the first token
    left out: :func:`run` has done both before starting the workers.
    """
    from service.api.app import create_app

    return create_app(Settings(migrate_on_start=False))


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(prog="python -m service.api.server")
    parser.add_argument("--host", default="127.0.0.1")
    parser.add_argument("--port", type=int, default=8000)
    parser.add_argument("--workers", type=int, default=1)
    args = parser.parse_args(argv)
    run(host=args.host, port=args.port, workers=args.workers)
    return 0


if __name__ == "__main__":
    sys.exit(main())
