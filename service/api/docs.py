"""The interactive API docs (``/docs``, Swagger UI; ``/redoc``, ReDoc) served offline.

FastAPI's own pages load their scripts, styles and favicon from a public CDN and an external
site, so on a machine without internet they stay blank. Here the pages load Swagger UI's and
ReDoc's bundles and a favicon as shipped by the ``fastapi-offline`` package, from the service
itself under :data:`ASSETS_URL`. The ReDoc bundle draws one image from its maker's site (the
logo beside "API docs by Redocly" in its menu); it is served with that address replaced by an
empty ``data:`` image, which the bundle then hides. The pages get a Content-Security-Policy
(:data:`DOCS_CSP`) that allows this server as the only source, so anything else a page asked
for would be refused by the browser.
"""

from __future__ import annotations

from functools import cache
from importlib.resources import files
from pathlib import Path
from typing import Any

from fastapi import FastAPI, Request
from fastapi.openapi.docs import (
    get_redoc_html,
    get_swagger_ui_html,
    get_swagger_ui_oauth2_redirect_html,
)
from fastapi.responses import HTMLResponse, Response
from fastapi.staticfiles import StaticFiles

DOCS_URL = "/docs"
REDOC_URL = "/redoc"
OAUTH2_REDIRECT_URL = "/docs/oauth2-redirect"
ASSETS_URL = "/docs-assets"
DOCS_PATHS = (DOCS_URL, REDOC_URL, OAUTH2_REDIRECT_URL)

DOCS_CSP = (
    "default-src 'none'; script-src 'self' 'unsafe-inline'; style-src 'self' 'unsafe-inline'; "
    "img-src 'self' data:; font-src 'self' data:; connect-src 'self'; worker-src 'self' blob:; "
    "frame-ancestors 'none'; base-uri 'none'; form-action 'none'"
)
"""The docs pages' policy: their inline start-up script, the bundles under :data:`ASSETS_URL`,
the OpenAPI document and the operations tried from the page, all from this server only."""

REDOC_BUNDLE = "redoc.standalone.js"
REDOC_LOGO = b"https://cdn.redoc.ly/redoc/logo-mini.svg"
"""The one outside address the ReDoc bundle loads by itself."""


ASSETS_CACHE_CONTROL = "public, max-age=86400"
"""The bundles are the installed package's files: a browser may keep them a day (and then
revalidate them by their ``ETag``) instead of fetching 2.5 MB on every view of the docs."""


class _Assets(StaticFiles):
    async def get_response(self, path: str, scope: Any) -> Response:
        response = await super().get_response(path, scope)
        if response.status_code in (200, 304):
            response.headers["Cache-Control"] = ASSETS_CACHE_CONTROL
        return response


def assets_dir() -> Path:
    """The folder of Swagger UI's and ReDoc's files that ``fastapi-offline`` ships."""
    return Path(str(files("fastapi_offline") / "static"))


@cache
def redoc_bundle() -> bytes:
    """ReDoc's bundle with its logo's outside address replaced by an empty image."""
    return (assets_dir() / REDOC_BUNDLE).read_bytes().replace(REDOC_LOGO, b"data:,")


def make_app(**kwargs: Any) -> FastAPI:
    """A ``FastAPI`` whose docs pages load everything from this server."""
    app = FastAPI(
        docs_url=None,
        redoc_url=None,
        swagger_ui_oauth2_redirect_url=OAUTH2_REDIRECT_URL,
        **kwargs,
    )
    openapi_url = app.openapi_url or "/openapi.json"
    title = app.title

    def root(request: Request) -> str:
        return str(request.scope.get("root_path", ""))

    @app.get(DOCS_URL, include_in_schema=False)
    async def swagger_ui(request: Request) -> HTMLResponse:
        base = root(request)
        return get_swagger_ui_html(
            openapi_url=f"{base}{openapi_url}",
            title=f"{title} - Swagger UI",
            oauth2_redirect_url=f"{base}{OAUTH2_REDIRECT_URL}",
            swagger_js_url=f"{base}{ASSETS_URL}/swagger-ui-bundle.js",
            swagger_css_url=f"{base}{ASSETS_URL}/swagger-ui.css",
            swagger_favicon_url=f"{base}{ASSETS_URL}/favicon.png",
        )

    @app.get(OAUTH2_REDIRECT_URL, include_in_schema=False)
    async def swagger_ui_redirect() -> HTMLResponse:
        return get_swagger_ui_oauth2_redirect_html()

    @app.get(REDOC_URL, include_in_schema=False)
    async def redoc(request: Request) -> HTMLResponse:
        base = root(request)
        return get_redoc_html(
            openapi_url=f"{base}{openapi_url}",
            title=f"{title} - ReDoc",
            redoc_js_url=f"{base}{ASSETS_URL}/{REDOC_BUNDLE}",
            redoc_favicon_url=f"{base}{ASSETS_URL}/favicon.png",
            with_google_fonts=False,
        )

    # Before the folder's mount, which would otherwise answer this path with the file as is.
    @app.get(f"{ASSETS_URL}/{REDOC_BUNDLE}", include_in_schema=False)
    async def redoc_js() -> Response:
        return Response(
            redoc_bundle(),
            media_type="text/javascript; charset=utf-8",
            headers={"Cache-Control": ASSETS_CACHE_CONTROL},
        )

    app.mount(ASSETS_URL, _Assets(directory=assets_dir()), name="docs-assets")
    return app
