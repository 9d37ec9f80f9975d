"""Finding the gate policy an assessment names: stored (newest or pinned ``name@3``), the
built-in ``default``, or an inline policy document."""

from __future__ import annotations

import re
from typing import Any

from service.core.policy import Policy, PolicyError, default_policy
from service.store.port import Store

from .errors import ApiError, policy_errors
from .httputil import MAX_INT

NAME_PATTERN = r"^[A-Za-z0-9][A-Za-z0-9._-]{0,99}$"
_NAME = re.compile(NAME_PATTERN)
BUILTIN_DEFAULT = "default"


def valid_name(name: str) -> bool:
    return bool(_NAME.match(name))


_BUILTIN: list[Policy] = []
_BUILTIN_DOCUMENT: list[dict[str, Any]] = []
# Stored policy versions never change, so their validated form is kept per (name, version).
_PARSED: dict[tuple[str, int], Policy] = {}
_PARSED_MAX = 256


def builtin_default() -> Policy:
    """The gate's default policy (built once per process; policies are immutable)."""
    if not _BUILTIN:
        _BUILTIN.append(default_policy())
    return _BUILTIN[0]


def builtin_document() -> dict[str, Any]:
    """The built-in default policy's document, built once: callers only read it."""
    if not _BUILTIN_DOCUMENT:
        _BUILTIN_DOCUMENT.append(builtin_default().to_dict())
    return _BUILTIN_DOCUMENT[0]


def _parsed(name: str, version: int, document: dict[str, Any]) -> Policy:
    key = (name, version)
    policy = _PARSED.get(key)
    if policy is None:
        policy = policy_from_document(document, loc="policy")
        if len(_PARSED) >= _PARSED_MAX:
            _PARSED.clear()
        _PARSED[key] = policy
    return policy


def policy_from_document(document: dict[str, Any], *, loc: str = "policy") -> Policy:
    """Validate a policy document with the gate (422 naming the field on a problem)."""
    try:
        return Policy.from_dict(document)
    except PolicyError as exc:
        errors = policy_errors(exc, prefix=loc)
        raise ApiError(
            422, f"{errors[0]['loc']}: {errors[0]['message']}", errors=errors, slug="invalid-policy"
        ) from None


def stored_or_builtin(
    store: Store, name: str, version: int | None = None
) -> tuple[Policy, dict[str, Any]] | None:
    """The policy called ``name`` (newest, or ``version``) with its document, or ``None``.

    The built-in default is version 1 of ``default``; stored versions of ``default`` follow it.
    """
    if version is None:
        latest = store.latest_policy_document(name=name)
        if latest is not None:
            return _parsed(name, latest[0], latest[1]), latest[1]
    else:
        stored = store.get_policy(name=name, version=version)
        if stored is not None:
            return _parsed(name, stored.version, stored.document), stored.document
    if name == BUILTIN_DEFAULT and version in (None, 1):
        return builtin_default(), builtin_document()
    return None


def resolve(store: Store, spec: str | dict[str, Any]) -> tuple[Policy, dict[str, Any]]:
    """The policy an assessment request names (``"name"``, ``"name@version"`` or a document)."""
    if isinstance(spec, dict):
        policy = policy_from_document(spec)
        if "\x00" in policy.name:
            raise ApiError(
                422,
                "policy.name: must not contain NUL characters",
                errors=[{"loc": "policy.name", "message": "must not contain NUL characters"}],
            )
        return policy, policy.to_dict()
    name, at, pinned = spec.partition("@")
    version: int | None = None
    if at:
        if not pinned.isdigit() or not 1 <= int(pinned) <= MAX_INT:
            raise ApiError(
                422,
                "policy: a pinned version is written name@N with N >= 1",
                errors=[{"loc": "policy", "message": f"bad version in {spec!r}"}],
            )
        version = int(pinned)
    found = stored_or_builtin(store, name, version) if valid_name(name) else None
    if found is None:
        what = f"policy {name!r}" + (f" version {version}" if version else "")
        raise ApiError(
            422,
            f"policy: unknown {what}",
            errors=[
                {
                    "loc": "policy",
                    "message": f"unknown {what}; store it with "
                    "POST /v1/policies or send the policy inline",
                }
            ],
            slug="unknown-policy",
        )
    return found
