"""Unknown or repeated query parameters of a GET are a 422 naming them, as a POST's fields are.

The framework reads the query parameters an endpoint declares and ignores any other, so a typo
(``GET /v1/assessments?modle=x``) answered the unfiltered list with 200. :func:`reject_unknown`,
a dependency of the whole app, checks the query string of every GET against the names its
operation declares (its own parameters, its dependencies' and those documented in its
``openapi_extra``, read once per operation): a name it does not take, or a single-valued one
given twice, answers ``422 application/problem+json`` with one ``query.NAME`` error each (a
close match suggested). :func:`document` adds that 422 to each GET's OpenAPI responses.
Values are still checked by the declared types (``limit=abc``, an unknown ``verdict``), with
the same ``query.NAME`` locations.

An operation that needs a token checks its query string once the token is admitted (in the
``require`` dependency, or where a report page admits its token or signed link), so a request
without a valid token is a 401 whatever its parameters; the others (the health probes) are
checked first thing. Operations other than GET keep their own checks
(the CSV upload names its unknown parameters itself) and return from it at once.
"""

from __future__ import annotations

import difflib
import typing
from typing import Any

from fastapi import APIRouter, Request
from fastapi.routing import APIRoute
from starlette.datastructures import QueryParams

from .errors import ApiError

SHOWN_NAME = 40
"""Most characters of an unknown parameter's name an error repeats."""


def declared(route: APIRoute) -> tuple[frozenset[str], frozenset[str]]:
    """The query parameter names ``route`` takes, and those of them that take one value."""
    names: set[str] = set()
    single: set[str] = set()
    for field in _query_fields(route.dependant):
        names.add(field.alias)
        origin = typing.get_origin(field.field_info.annotation)
        args = typing.get_args(field.field_info.annotation)
        many = origin in (list, tuple, set, frozenset) or any(
            typing.get_origin(a) in (list, tuple, set, frozenset) for a in args
        )
        if not many:
            single.add(field.alias)
    for param in (route.openapi_extra or {}).get("parameters", []):
        if param.get("in") == "query":
            names.add(param["name"])
            single.add(param["name"])
    return frozenset(names), frozenset(single)


def _query_fields(dependant: Any) -> list[Any]:
    """The query parameters of ``dependant`` and of its dependencies, depth first."""
    out = list(dependant.query_params)
    for sub in dependant.dependencies:
        out += _query_fields(sub)
    return out


def problems(query: bytes, allowed: frozenset[str], single: frozenset[str]) -> list[dict[str, str]]:
    """One ``{loc, message}`` per unknown name and per single-valued name given twice."""
    if not query:
        return []
    out: list[dict[str, str]] = []
    counts: dict[str, int] = {}
    for name, _value in QueryParams(query).multi_items():
        counts[name] = counts.get(name, 0) + 1
    for name, count in counts.items():
        shown = name[:SHOWN_NAME] + ("..." if len(name) > SHOWN_NAME else "")
        if name not in allowed:
            out.append({"loc": f"query.{shown}", "message": _unknown(name, allowed)})
        elif count > 1 and name in single:
            out.append({"loc": f"query.{shown}", "message": f"given {count} times; give it once"})
    return out


def _unknown(name: str, allowed: frozenset[str]) -> str:
    if not allowed:
        return "unknown query parameter; this endpoint takes none"
    message = f"unknown query parameter; this endpoint takes {', '.join(sorted(allowed))}"
    close = difflib.get_close_matches(name.lower(), sorted(allowed), n=1, cutoff=0.6)
    return message + (f" (did you mean {close[0]!r}?)" if close else "")


_NAMES = "_plumbline_query_names"
"""The attribute of an operation that keeps its declared names once read."""
_LATER = "_plumbline_query_checked_later"
"""Marks a dependency or an endpoint that calls :func:`check` itself, after admitting the
request (its token or signed link)."""


def checked_later(fn: Any) -> Any:
    """Mark ``fn`` (the token dependency, or an endpoint that admits requests itself) as
    calling :func:`check` once the request is admitted: an unknown parameter from someone
    without a valid token is then a 401 like any other request of theirs."""
    setattr(fn, _LATER, True)
    return fn


def _names(route: APIRoute) -> tuple[frozenset[str], frozenset[str], bool]:
    found = getattr(route, _NAMES, None)
    if found is None:
        later = getattr(route.endpoint, _LATER, False) or any(
            getattr(d.call, _LATER, False) for d in route.dependant.dependencies
        )
        found = (*declared(route), bool(later))
        setattr(route, _NAMES, found)
    return found


def check(request: Request) -> None:
    """Refuse a GET whose query string holds a name its operation does not declare, or a
    single-valued one twice, with a 422 naming each."""
    if request.method != "GET":
        return
    route = request.scope.get("route")
    if not isinstance(route, APIRoute):
        return
    allowed, single, _later = _names(route)
    found = problems(request.scope.get("query_string", b""), allowed, single)
    if found:
        more = len(found) - 1
        raise ApiError(
            422,
            f"{found[0]['loc']}: {found[0]['message']}"
            + (f" (and {more} more problem{'s' if more > 1 else ''})" if more else ""),
            errors=found,
        )


async def reject_unknown(request: Request) -> None:
    """The app-wide dependency: :func:`check`, for the operations that do not check later
    (after their token), such as the health probes."""
    if request.method != "GET":
        return
    route = request.scope.get("route")
    if isinstance(route, APIRoute) and not _names(route)[2]:
        check(request)


def document(router: APIRouter) -> None:
    """Add the 422 this check may answer to every GET operation of ``router`` (before the
    router is included)."""
    from .httputil import problem_docs

    for route in router.routes:
        if isinstance(route, APIRoute) and "GET" in (route.methods or ()):
            for code, doc in problem_docs(422).items():
                route.responses.setdefault(code, doc)
