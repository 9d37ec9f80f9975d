"""Readers for the scalar fields of a request (names, integers, the policy, labels).

Shared by the JSON body and the CSV upload's query parameters: each reads one value, reports a
problem with its field to an :class:`~service.ingest.request.Errors` and returns a default.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from .request import MAX_NAME_LENGTH, NUL_MESSAGE, QUOTE_LIMIT, Errors, describe
from .shape import BASELINE_FIELDS


def read_name(doc: Mapping[str, Any], key: str, errs: Errors, *, required: bool) -> str:
    value = doc.get(key)
    if value is None:
        if required:
            errs.add(key, "is required")
        return ""
    if not isinstance(value, str) or not value.strip():
        errs.add(key, f"must be a non-empty string, got {describe(value)}")
        return ""
    if len(value) > MAX_NAME_LENGTH:
        errs.add(key, f"must be at most {MAX_NAME_LENGTH} characters")
        return ""
    if "\x00" in value:
        errs.add(key, "must not contain NUL characters")
        return ""
    return value


def read_int(value: Any, loc: str, errs: Errors, *, default: int, minimum: int) -> int:
    if value is None:
        return default
    if isinstance(value, float) and value.is_integer():
        value = int(value)
    if isinstance(value, bool) or not isinstance(value, int):
        errs.add(loc, f"must be an integer, got {describe(value)}")
        return default
    if value < minimum:
        errs.add(loc, f"must be at least {minimum}, got {value}")
        return default
    if value > 1_000_000:
        errs.add(loc, f"must be at most 1000000, got {value}")
        return default
    return value


def read_policy(value: Any, errs: Errors) -> str | dict[str, Any]:
    if value is None:
        return "default"
    if isinstance(value, str):
        if not value.strip() or len(value) > MAX_NAME_LENGTH or "\x00" in value:
            errs.add("policy", "must be a policy name (1 to 200 characters) or a policy object")
        return value
    if isinstance(value, dict):
        return value
    errs.add("policy", f"must be a policy name or a policy object, got {describe(value)}")
    return "default"


def read_labels(value: Any, errs: Errors) -> dict[str, str]:
    if value is None:
        return {}
    if not isinstance(value, dict):
        errs.add("labels", f"must be an object of string values, got {describe(value)}")
        return {}
    out: dict[str, str] = {}
    for key, item in value.items():
        if "\x00" in key or (isinstance(item, str) and "\x00" in item):
            errs.add(f"labels.{key[:QUOTE_LIMIT]}", NUL_MESSAGE)
        elif isinstance(item, str):
            out[key] = item
        elif isinstance(item, (int, float)) and not isinstance(item, bool):
            out[key] = str(item)
        else:
            errs.add(f"labels.{key[:QUOTE_LIMIT]}", f"must be a string, got {describe(item)}")
    return out


def read_baseline(value: Any, errs: Errors) -> str | None:
    """The ``baseline`` object's ``version`` (a stored version, or ``latest-pass``), or
    ``None`` when no baseline is asked for."""
    if value is None:
        return None
    if not isinstance(value, dict):
        errs.add(
            "baseline",
            f'must be an object such as {{"version": "latest-pass"}}, got {describe(value)}',
        )
        return None
    for key in value:
        if key not in BASELINE_FIELDS:
            errs.add(f"baseline.{key}", f"unknown field; expected one of {sorted(BASELINE_FIELDS)}")
    if "version" not in value:
        errs.add("baseline.version", "is required: a stored version of the model or latest-pass")
        return None
    return read_baseline_version(value["version"], "baseline.version", errs)


def read_baseline_version(value: Any, loc: str, errs: Errors) -> str | None:
    """A baseline version as sent (JSON ``baseline.version`` or the CSV ``baseline``
    parameter): a non-empty name of at most ``MAX_NAME_LENGTH`` characters."""
    if not isinstance(value, str) or not value.strip():
        errs.add(loc, f"must be a non-empty string, got {describe(value)}")
        return None
    if len(value) > MAX_NAME_LENGTH:
        errs.add(loc, f"must be at most {MAX_NAME_LENGTH} characters")
        return None
    if "\x00" in value:
        errs.add(loc, NUL_MESSAGE)
        return None
    return value
