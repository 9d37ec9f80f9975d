"""Signed, expiring links that open one assessment's report without a bearer token.

A link carries two query parameters: ``expires`` (Unix seconds) and ``signature``, the
HMAC-SHA256 (RFC 2104) under the server's link secret of a message that binds the purpose,
the assessment id and the expiry. Changing any of them, or using the signature for another
assessment, breaks the signature; a link past its expiry is refused even when intact.
The report's series pages accept the same pair: it opens that report, and only that report.
"""

from __future__ import annotations

import base64
import hashlib
import hmac
import secrets
import time
from dataclasses import dataclass
from datetime import UTC, datetime
from urllib.parse import urlencode

PURPOSE = b"plumbline/report-link/v1"
SECRET_BYTES = 32
MIN_SECRET_LENGTH = 16


class LinkError(Exception):
    """A link that does not open: ``reason`` says why, for the 403 problem's detail."""

    def __init__(self, reason: str) -> None:
        self.reason = reason
        super().__init__(reason)


class LinkExpired(LinkError):
    pass


class LinkInvalid(LinkError):
    pass


@dataclass(frozen=True)
class SignedLink:
    assessment_id: str
    expires: int
    signature: str

    @property
    def expires_at(self) -> str:
        """The expiry as an RFC 3339 UTC timestamp."""
        return datetime.fromtimestamp(self.expires, UTC).isoformat().replace("+00:00", "Z")

    @property
    def query(self) -> str:
        """``expires=...&signature=...`` to append to the report's URL."""
        return urlencode({"expires": self.expires, "signature": self.signature})


def new_secret() -> str:
    """A fresh random link secret (256 bits, URL-safe text)."""
    return secrets.token_urlsafe(SECRET_BYTES)


def _key(secret: str | bytes) -> bytes:
    key = secret.encode() if isinstance(secret, str) else bytes(secret)
    if len(key) < MIN_SECRET_LENGTH:
        raise ValueError(f"link secret must be at least {MIN_SECRET_LENGTH} bytes")
    return key


def _signature(secret: str | bytes, assessment_id: str, expires: int) -> str:
    message = b"\n".join((PURPOSE, assessment_id.encode(), str(int(expires)).encode()))
    digest = hmac.new(_key(secret), message, hashlib.sha256).digest()
    return base64.urlsafe_b64encode(digest).rstrip(b"=").decode()


def sign_link(
    *, secret: str | bytes, assessment_id: str, ttl_seconds: int, now: float | None = None
) -> SignedLink:
    """A link to ``assessment_id``'s report valid for ``ttl_seconds`` from ``now``."""
    if ttl_seconds <= 0:
        raise ValueError(f"ttl_seconds must be positive, got {ttl_seconds}")
    expires = int(time.time() if now is None else now) + int(ttl_seconds)
    return SignedLink(assessment_id, expires, _signature(secret, assessment_id, expires))


def verify_link(
    *,
    secret: str | bytes,
    assessment_id: str,
    expires: str | int | None,
    signature: str | None,
    now: float | None = None,
) -> SignedLink:
    """Check a link's ``expires`` and ``signature`` for ``assessment_id``.

    Raises
    ------
    LinkInvalid
        A parameter is missing or malformed, or the signature does not match (tampered, or
        made for another assessment or with another secret).
    LinkExpired
        The signature matches but the expiry has passed.
    """
    if expires is None or signature is None:
        raise LinkInvalid("the link needs both 'expires' and 'signature'")
    try:
        when = int(expires)
    except (TypeError, ValueError):
        raise LinkInvalid("the link's 'expires' is not a whole number of seconds") from None
    expected = _signature(secret, assessment_id, when)
    if not hmac.compare_digest(expected.encode(), str(signature).encode()):
        raise LinkInvalid("the link's signature does not match this report")
    if (time.time() if now is None else now) >= when:
        raise LinkExpired("the link has expired; ask for a new one")
    return SignedLink(assessment_id, when, expected)
