"""Bearer tokens and scopes.

``submit`` may post assessments, ``read`` may GET under /v1, ``admin`` may do everything
(tokens, policies, and what the other two may). Tokens are kept as SHA-256 hashes only;
``PLUMBLINE_ADMIN_TOKEN`` is compared in constant time and holds every scope.
"""

from __future__ import annotations

import hmac
from collections.abc import Callable
from dataclasses import dataclass

from fastapi import Request
from starlette.concurrency import run_in_threadpool

from service.store import repository as repo

from .errors import ApiError

SCOPES = repo.SCOPES
_CHALLENGE = {"WWW-Authenticate": 'Bearer realm="plumbline"'}


@dataclass(frozen=True)
class Principal:
    """Who made the request: the token's id (``"env"`` for the admin token) and scopes."""

    token_id: str
    scopes: frozenset[str]

    def allows(self, scope: str) -> bool:
        return "admin" in self.scopes or scope in self.scopes


def _bearer(request: Request) -> str:
    header = request.headers.get("authorization")
    if not header:
        raise ApiError(401, "missing Authorization header: send 'Authorization: Bearer <token>'",
                       headers=_CHALLENGE)
    scheme, _, token = header.partition(" ")
    token = token.strip()
    if scheme.lower() != "bearer" or not token:
        raise ApiError(401, "Authorization must be 'Bearer <token>'", headers=_CHALLENGE)
    return token


def _env_admin(request: Request, token: str) -> Principal | None:
    settings = request.app.state.settings
    if settings.admin_token is not None:
        expected = settings.admin_token.get_secret_value().encode("utf-8")
        if hmac.compare_digest(token.encode("utf-8"), expected):
            return Principal(token_id="env", scopes=frozenset(SCOPES))
    return None


def _stored(request: Request, token: str) -> Principal:
    found = repo.find_token(request.app.state.engine, secret=token)
    if found is None:
        raise ApiError(401, "unknown or revoked token", headers=_CHALLENGE)
    return Principal(token_id=found.id, scopes=frozenset(found.scopes))


def require(scope: str) -> Callable[[Request], object]:
    """A dependency that admits a request whose token holds ``scope`` (or ``admin``)."""
    if scope not in SCOPES:
        raise ValueError(f"unknown scope {scope!r}")

    async def dependency(request: Request) -> Principal:
        token = _bearer(request)
        principal = _env_admin(request, token) or await run_in_threadpool(
            _stored, request, token)
        if not principal.allows(scope):
            raise ApiError(403, f"this token lacks the {scope!r} scope (it holds: "
                           f"{', '.join(sorted(principal.scopes))})")
        request.state.principal = principal
        return principal

    dependency.__name__ = f"require_{scope}"
    return dependency


def ensure_first_token(engine, settings) -> str | None:
    """On a first start with no token anywhere (none stored, no ``PLUMBLINE_ADMIN_TOKEN``),
    create an admin token and return its secret, to be printed once; else ``None``."""
    if settings.admin_token is not None or repo.count_tokens(engine) > 0:
        return None
    _record, secret = repo.create_token(engine, scopes=["admin"], label="first start")
    return secret
