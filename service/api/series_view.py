"""Answers sized to the question: ``?series=all|flagged|none`` on an assessment.

``all`` (the default) answers every series, as the assessment always did; ``flagged`` only
the series that do not pass; ``none`` no series rows at all. The verdict, the reasons, the
check summaries and the fleet's figures and counts are always whole. A partial answer says so
in ``series_shown`` (just before ``series``), so a reader never takes the rows given for the
whole fleet. Rows left out are not built or encoded: a computation that is not stored builds
only the rows it answers (:func:`service.core.gate.assess_many_results`), and a stored
assessment's rows are joined from their stored JSON, those left out untouched.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence

from service.core.gate import SHOWN
from service.store.records import StoredAssessment

from .errors import ApiError

PARAMETER = {
    "name": "series",
    "in": "query",
    "required": False,
    "description": "which series rows the answer lists: all (default), flagged (those not "
    "passing) or none (verdict, reasons, check summaries and fleet counts only)",
    "schema": {"type": "string", "enum": list(SHOWN), "default": "all"},
}


def shown_of(query: Mapping[str, str]) -> str:
    """The ``series`` query parameter; a 422 naming it for anything but the three views."""
    value = query.get("series")
    if value is None:
        return "all"
    if value not in SHOWN:
        raise ApiError(
            422,
            f"series must be one of {', '.join(SHOWN)}, got {value[:40]!r}",
            errors=[{"loc": "query.series", "message": f"must be one of {', '.join(SHOWN)}"}],
        )
    return value


def joined(head: bytes, rows: Sequence[bytes], shown: str) -> bytes:
    """The answer from its JSON without ``series`` (``head``) and the series rows to give,
    marked with ``series_shown`` unless they are all of them."""
    if not head.endswith(b"}"):
        raise ValueError("the head is not a JSON object")
    glue = b"," if len(head) > 2 else b""
    mark = b"" if shown == "all" else b'"series_shown":"' + shown.encode() + b'",'
    return head[:-1] + glue + mark + b'"series":[' + b",".join(rows) + b"]}"


def picked(rows: Sequence[bytes], verdicts: Sequence[str], shown: str) -> Sequence[bytes]:
    """The rows a view gives, from every series' row and verdict."""
    if shown == "all":
        return rows
    if shown == "none":
        return ()
    return [row for row, v in zip(rows, verdicts, strict=True) if v != "pass"]


def stored_answer(stored: StoredAssessment, shown: str) -> bytes:
    """A stored assessment's answer in one of the views."""
    if shown == "all":
        return stored.to_json()
    return joined(stored.head, picked(stored.series, stored.verdicts, shown), shown)
