"""Security headers on every response, and the wiring of every hardening measure into the app.

:func:`install_hardening` is the one call ``create_app`` makes, after the routers and the
OpenAPI set-up and before CORS (which the app adds only when ``settings.cors_origins`` names
origins: CORS is off by default, so a page on another origin cannot read any response). It adds

1. :class:`~service.api.limits.LimitsMiddleware` (rate limits, body size, body read time),
2. :class:`SecurityHeadersMiddleware` around it, so even a ``429`` or ``413`` answered by the
   limits carries the headers,
3. those answers (``408``, ``413``, ``429``, and the ``503`` with ``Retry-After`` of an
   unavailable database, mapped in :mod:`service.api.errors`) in the OpenAPI document.

The headers follow the OWASP Secure Headers Project's recommendations for an API: no MIME
sniffing, no framing, no referrer, a Content-Security-Policy that loads nothing, responses kept
out of shared caches, and HSTS when the request came over HTTPS. A header the application set
itself is left as it is.
"""

from __future__ import annotations

from collections.abc import Iterable
from typing import Any

from .docs import DOCS_CSP, DOCS_PATHS
from .limits import ASGIApp, LimitsMiddleware, Message, Receive, Scope, Send

__all__ = [
    "API_CSP",
    "HTML_CSP",
    "SECURITY_HEADERS",
    "SecurityHeadersMiddleware",
    "document_limits",
    "install_hardening",
]

SECURITY_HEADERS: dict[str, str] = {
    "X-Content-Type-Options": "nosniff",
    "X-Frame-Options": "DENY",
    "Referrer-Policy": "no-referrer",
    "Cross-Origin-Opener-Policy": "same-origin",
    "Cross-Origin-Resource-Policy": "same-origin",
    "Permissions-Policy": "camera=(), microphone=(), geolocation=(), payment=()",
}
"""Set on every response."""

API_CSP = "default-src 'none'; frame-ancestors 'none'; base-uri 'none'; form-action 'none'"
"""Content-Security-Policy for everything but HTML: nothing may load, nothing may frame it."""

HTML_CSP = (
    "default-src 'none'; style-src 'unsafe-inline'; script-src 'unsafe-inline'; "
    "img-src data:; frame-ancestors 'none'; base-uri 'none'; form-action 'none'"
)
"""Content-Security-Policy for self-contained HTML pages (inline styles, scripts and SVG only)."""


HSTS = "max-age=31536000; includeSubDomains"
CACHE_CONTROL = "no-store"


class SecurityHeadersMiddleware:
    """Add :data:`SECURITY_HEADERS`, a Content-Security-Policy, ``Cache-Control`` and HSTS."""

    def __init__(self, app: ASGIApp, *, docs_paths: Iterable[str] = ()) -> None:
        self.app = app
        self.docs_paths = frozenset(p for p in docs_paths if p)

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return
        path = scope.get("path", "")
        https = scope.get("scheme") == "https"
        docs = path in self.docs_paths

        async def send_with_headers(message: Message) -> None:
            if message["type"] == "http.response.start":
                message["headers"] = _with_security_headers(
                    list(message.get("headers", [])), docs=docs, https=https
                )
            await send(message)

        await self.app(scope, receive, send_with_headers)


def _with_security_headers(
    headers: list[tuple[bytes, bytes]], *, docs: bool, https: bool
) -> list[tuple[bytes, bytes]]:
    present = {k.lower(): v for k, v in headers}
    wanted: dict[str, str] = dict(SECURITY_HEADERS)
    html = present.get(b"content-type", b"").lower().startswith(b"text/html")
    wanted["Content-Security-Policy"] = DOCS_CSP if docs else HTML_CSP if html else API_CSP
    wanted["Cache-Control"] = CACHE_CONTROL
    if https:
        wanted["Strict-Transport-Security"] = HSTS
    for name, value in wanted.items():
        key = name.lower().encode()
        if key not in present:
            headers.append((key, value.encode()))
    return headers


def _problem_response(description: str, *, retry_after: bool) -> dict[str, Any]:
    entry: dict[str, Any] = {
        "description": description,
        "content": {
            "application/problem+json": {"schema": {"$ref": "#/components/schemas/Problem"}}
        },
    }
    if retry_after:
        entry["headers"] = {
            "Retry-After": {
                "description": "Seconds to wait before retrying.",
                "schema": {"type": "integer", "minimum": 1},
            }
        }
    return entry


LIMIT_RESPONSES = {
    "429": ("Too many requests for this token (rate limit)", True),
    "503": ("The database is unavailable, or the server is overloaded", True),
}
BODY_RESPONSES = {
    "408": ("The request body did not arrive in time", False),
    "413": ("The request body is larger than the limit", False),
}


def _problem_422(responses: dict[str, Any]) -> None:
    """The framework documents its own 422 as ``application/json`` (HTTPValidationError); the
    service answers every 422 as problem+json, so say so."""
    entry = responses.get("422")
    if not isinstance(entry, dict):
        return
    content = entry.get("content", {})
    schema = content.get("application/json", {}).get("schema", {})
    if set(content) == {"application/json"} and schema.get("$ref", "").endswith(
        "/HTTPValidationError"
    ):
        entry["content"] = {
            "application/problem+json": {"schema": {"$ref": "#/components/schemas/Problem"}}
        }


def document_limits(doc: dict[str, Any]) -> dict[str, Any]:
    """Add the hardening answers to every ``/v1`` operation of an OpenAPI document (and
    document the framework's 422 as the problem+json it is)."""
    schemas = doc.get("components", {}).get("schemas", {})
    if "Problem" not in schemas:
        return doc
    for path, item in doc.get("paths", {}).items():
        if not path.startswith("/v1/"):
            continue
        for method, operation in item.items():
            if not isinstance(operation, dict) or "responses" not in operation:
                continue
            _problem_422(operation["responses"])
            wanted = dict(LIMIT_RESPONSES)
            if method in ("post", "put", "patch"):
                wanted.update(BODY_RESPONSES)
            for status, (description, retry_after) in wanted.items():
                operation["responses"].setdefault(
                    status, _problem_response(description, retry_after=retry_after)
                )
    return doc


def install_hardening(app: Any, settings: Any) -> None:
    """Add the limits, the security headers and their documentation."""
    app.add_middleware(
        LimitsMiddleware,
        rate_limit_per_second=settings.rate_limit_per_second,
        rate_limit_burst=settings.rate_limit_burst,
        max_body_bytes=settings.max_body_bytes,
        body_read_timeout_seconds=settings.body_read_timeout_seconds,
    )
    app.add_middleware(SecurityHeadersMiddleware, docs_paths=DOCS_PATHS)

    build = app.openapi

    def build_documented() -> dict[str, Any]:
        documented = getattr(app.state, "openapi_documented", None)
        if documented is None:
            documented = document_limits(build())
            app.state.openapi_documented = documented
        return documented

    app.openapi = build_documented
