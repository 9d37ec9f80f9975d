"""Signed report links: HMAC-SHA256 over the documented message, expiry, tampering."""

from __future__ import annotations

import base64
import hashlib

import pytest

from service.links import (
    PURPOSE,
    LinkExpired,
    LinkInvalid,
    new_secret,
    sign_link,
    verify_link,
)

SECRET = "test-secret-0123456789abcdef"
NOW = 1_764_633_600  # 2025-12-02T00:00:00Z


def rfc2104_hmac_sha256(key: bytes, message: bytes) -> bytes:
    """HMAC written out from RFC 2104's definition, H((K ^ opad) || H((K ^ ipad) || m)),
    independent of the ``hmac`` module the service uses."""
    block = 64
    if len(key) > block:
        key = hashlib.sha256(key).digest()
    key = key.ljust(block, b"\0")
    inner = hashlib.sha256(bytes(k ^ 0x36 for k in key) + message).digest()
    return hashlib.sha256(bytes(k ^ 0x5C for k in key) + inner).digest()


def test_reference_hmac_matches_rfc4231_test_case_2() -> None:
    # RFC 4231, section 4.3 (Test Case 2): key "Jefe", data "what do ya want for nothing?".
    expected = "5bdcc146bf60754e6a042426089575c75a003f089d2739839dec58b964ec3843"
    assert rfc2104_hmac_sha256(b"Jefe", b"what do ya want for nothing?").hex() == expected


def test_signature_is_hmac_sha256_of_purpose_id_and_expiry() -> None:
    link = sign_link(secret=SECRET, assessment_id="a1", ttl_seconds=3600, now=NOW)
    assert link.expires == NOW + 3600
    message = PURPOSE + b"\na1\n" + str(NOW + 3600).encode()
    digest = rfc2104_hmac_sha256(SECRET.encode(), message)
    assert link.signature == base64.urlsafe_b64encode(digest).rstrip(b"=").decode()
    assert link.expires_at == "2025-12-02T01:00:00Z"
    assert link.query == f"expires={NOW + 3600}&signature={link.signature}"


def test_valid_link_verifies_until_expiry() -> None:
    link = sign_link(secret=SECRET, assessment_id="a1", ttl_seconds=60, now=NOW)
    got = verify_link(
        secret=SECRET,
        assessment_id="a1",
        expires=str(link.expires),
        signature=link.signature,
        now=NOW + 59,
    )
    assert got == link
    with pytest.raises(LinkExpired, match="expired"):
        verify_link(
            secret=SECRET,
            assessment_id="a1",
            expires=link.expires,
            signature=link.signature,
            now=NOW + 60,
        )


@pytest.mark.parametrize(
    "change",
    ["other_assessment", "later_expiry", "flipped_signature", "other_secret", "missing"],
)
def test_tampered_link_is_invalid(change: str) -> None:
    link = sign_link(secret=SECRET, assessment_id="a1", ttl_seconds=60, now=NOW)
    args = {
        "secret": SECRET,
        "assessment_id": "a1",
        "expires": link.expires,
        "signature": link.signature,
        "now": NOW,
    }
    if change == "other_assessment":
        args["assessment_id"] = "a2"
    elif change == "later_expiry":
        args["expires"] = link.expires + 86400
    elif change == "flipped_signature":
        sig = link.signature
        args["signature"] = ("B" if sig[0] == "A" else "A") + sig[1:]
    elif change == "other_secret":
        args["secret"] = new_secret()
    else:
        args["signature"] = None
    with pytest.raises(LinkInvalid):
        verify_link(**args)


def test_expired_and_tampered_reports_tampering_first() -> None:
    # A forged link must not learn whether its expiry is the problem.
    link = sign_link(secret=SECRET, assessment_id="a1", ttl_seconds=60, now=NOW)
    with pytest.raises(LinkInvalid):
        verify_link(
            secret=SECRET,
            assessment_id="a1",
            expires=link.expires,
            signature=link.signature[:-2] + "xx",
            now=NOW + 3600,
        )


def test_bad_expiry_text_and_short_secret() -> None:
    with pytest.raises(LinkInvalid, match="expires"):
        verify_link(secret=SECRET, assessment_id="a1", expires="soon", signature="x")
    with pytest.raises(ValueError, match="at least 16 bytes"):
        sign_link(secret="short", assessment_id="a1", ttl_seconds=60)
    with pytest.raises(ValueError, match="ttl_seconds"):
        sign_link(secret=SECRET, assessment_id="a1", ttl_seconds=0)


def test_new_secrets_differ_and_are_long() -> None:
    a, b = new_secret(), new_secret()
    assert a != b and len(a) >= 43  # 32 random bytes in URL-safe base64
