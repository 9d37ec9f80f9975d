"""Bearer tokens and scopes.

``submit`` may post assessments, ``read`` may GET under /v1, ``admin`` may do everything
(tokens, policies, and what the other two may). Tokens are kept as SHA-256 hashes only;
``PLUMBLINE_ADMIN_TOKEN`` is compared in constant time and holds every scope.

A stored token, once verified, is remembered by the worker for ``token_cache_seconds``
(:class:`TokenCache`), so that a pipeline posting many small assessments does not pay a
database lookup (and a thread hop) on each. Revoking through the API forgets it at once on the
worker that revoked it; other workers, and revocations made on the database directly, take
effect within that time. ``0`` looks every request up.
"""

from __future__ import annotations

import hmac
import threading
import time
from collections.abc import Callable
from dataclasses import dataclass
from typing import Annotated

from fastapi import Depends, Request
from starlette.concurrency import run_in_threadpool

from service.settings import Settings
from service.store.port import Store
from service.store.records import SCOPES, hash_token

from . import query_check
from .deps import Services, get_services, get_settings, get_store
from .errors import ApiError

_CHALLENGE = {"WWW-Authenticate": 'Bearer realm="plumbline"'}


@dataclass(frozen=True)
class Principal:
    """Who made the request: the token's id (``"env"`` for the admin token) and scopes."""

    token_id: str
    scopes: frozenset[str]

    def allows(self, scope: str) -> bool:
        return "admin" in self.scopes or scope in self.scopes


class TokenCache:
    """Stored tokens this worker verified lately: SHA-256 of the secret -> principal, each for
    ``seconds`` after its lookup. Holds at most ``max_entries`` (then starts afresh); never
    remembers a failed lookup."""

    def __init__(
        self, seconds: float, max_entries: int = 4096, clock: Callable[[], float] = time.monotonic
    ) -> None:
        self.seconds = float(seconds)
        self.max_entries = max_entries
        self._clock = clock
        self._entries: dict[str, tuple[float, Principal]] = {}
        # Token ids revoked here lately: a lookup that began before the revocation must not
        # put the token back.
        self._revoked: dict[str, float] = {}
        self._lock = threading.Lock()  # revocations run in the thread pool

    def get(self, token: str) -> Principal | None:
        if self.seconds <= 0:
            return None
        key = hash_token(token)
        found = self._entries.get(key)
        if found is None:
            return None
        if self._clock() >= found[0]:
            with self._lock:
                self._entries.pop(key, None)
            return None
        return found[1]

    def put(self, token: str, principal: Principal) -> None:
        if self.seconds <= 0:
            return
        key = hash_token(token)
        now = self._clock()
        with self._lock:
            if self._revoked.get(principal.token_id, now) > now:
                return
            if len(self._entries) >= self.max_entries:
                self._entries.clear()
            self._entries[key] = (now + self.seconds, principal)

    def forget(self, token_id: str) -> None:
        """Drop the token with this id (it was just revoked here)."""
        now = self._clock()
        with self._lock:
            for key in [k for k, (_, p) in self._entries.items() if p.token_id == token_id]:
                del self._entries[key]
            self._revoked = {t: until for t, until in self._revoked.items() if until > now}
            self._revoked[token_id] = now + self.seconds


def _bearer(request: Request) -> str:
    header = request.headers.get("authorization")
    if not header:
        raise ApiError(
            401,
            "missing Authorization header: send 'Authorization: Bearer <token>'",
            headers=_CHALLENGE,
        )
    scheme, _, token = header.partition(" ")
    token = token.strip()
    if scheme.lower() != "bearer" or not token:
        raise ApiError(401, "Authorization must be 'Bearer <token>'", headers=_CHALLENGE)
    return token


def _env_admin(settings: Settings, token: str) -> Principal | None:
    if settings.admin_token is not None:
        expected = settings.admin_token.get_secret_value().encode("utf-8")
        if hmac.compare_digest(token.encode("utf-8"), expected):
            return Principal(token_id="env", scopes=frozenset(SCOPES))
    return None


def _stored(store: Store, token: str) -> Principal:
    found = store.find_token(secret=token)
    if found is None:
        raise ApiError(401, "unknown or revoked token", headers=_CHALLENGE)
    return Principal(token_id=found.id, scopes=frozenset(found.scopes))


async def authorize(
    request: Request, scope: str, *, settings: Settings, store: Store, cache: TokenCache
) -> Principal:
    """The request's principal if its token holds ``scope`` (401/403 otherwise)."""
    token = _bearer(request)
    principal = _env_admin(settings, token)
    if principal is None:
        principal = cache.get(token)
        if principal is None:
            principal = await run_in_threadpool(_stored, store, token)
            cache.put(token, principal)
    if not principal.allows(scope):
        raise ApiError(
            403,
            f"this token lacks the {scope!r} scope (it holds: "
            f"{', '.join(sorted(principal.scopes))})",
        )
    request.state.principal = principal
    return principal


def require(scope: str) -> Callable[..., object]:
    """A dependency that admits a request whose token holds ``scope`` (or ``admin``)."""
    if scope not in SCOPES:
        raise ValueError(f"unknown scope {scope!r}")

    async def dependency(
        request: Request,
        settings: Annotated[Settings, Depends(get_settings)],
        store: Annotated[Store, Depends(get_store)],
        services: Annotated[Services, Depends(get_services)],
    ) -> Principal:
        principal = await authorize(
            request, scope, settings=settings, store=store, cache=services.token_cache
        )
        query_check.check(request)  # a GET's query string, once the token is admitted
        return principal

    dependency.__name__ = f"require_{scope}"
    return query_check.checked_later(dependency)


def ensure_first_token(store: Store, settings: Settings) -> str | None:
    """On a first start with no token anywhere (none stored, no ``PLUMBLINE_ADMIN_TOKEN``),
    create an admin token and return its secret, to be printed once; else ``None``."""
    if settings.admin_token is not None or store.count_tokens() > 0:
        return None
    _record, secret = store.create_token(scopes=["admin"], label="first start")
    return secret


def announce_first_token(secret: str | None) -> None:
    """Print a newly minted first admin token, the only time it is ever shown."""
    if secret is not None:
        print(
            "No API token existed, so an admin token was created. It is shown only now; "
            f"keep it safe:\n\n    {secret}\n",
            flush=True,
        )
