"""Running the service under uvicorn: what ``plumbline serve`` calls."""

from __future__ import annotations

import argparse
import os
import sys

from service.settings import Settings


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
    """Serve the app built by ``create_app()`` from the environment's settings.

    Migrations run once here, before the workers start (they then skip them).
    """
    import uvicorn

    from service.api.slowclients import uvicorn_options

    settings = Settings()
    from service.api.auth import announce_first_token

    announce_first_token(prepare(settings))
    os.environ["PLUMBLINE_MIGRATE_ON_START"] = "false"
    uvicorn.run(
        "service.api.app:create_app",
        factory=True,
        host=host,
        port=port,
        workers=max(1, workers),
        log_level="info",
        access_log=False,
        proxy_headers=False,
        **uvicorn_options(settings),
    )


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
