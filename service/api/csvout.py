"""CSV output for spreadsheets and BI tools, safe against formula injection.

Text cells that begin with ``=``, ``+``, ``-``, ``@``, a tab or a carriage return are prefixed with
a single quote, so a spreadsheet shows them as text instead of running them as a formula
(OWASP's advice on CSV injection). Numbers are written as numbers, negative ones included: the
escaping applies to text only, so a column of residual statistics stays numeric.
"""

from __future__ import annotations

import csv
import io
from collections.abc import Iterable, Iterator, Sequence
from typing import Any

import orjson

_TRIGGERS = ("=", "+", "-", "@", "\t", "\r")


def escape_text(value: str) -> str:
    """``value`` made safe for a spreadsheet cell."""
    return "'" + value if value.startswith(_TRIGGERS) else value


def _cell(value: Any) -> Any:
    if value is None:
        return ""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, (int, float)):
        return repr(value) if isinstance(value, float) else value
    if isinstance(value, (dict, list)):
        return escape_text(orjson.dumps(value).decode())
    return escape_text(str(value))


def to_csv(header: Sequence[str], rows: Iterable[Sequence[Any]]) -> bytes:
    """CSV text (UTF-8, CRLF line ends as RFC 4180) with a header row."""
    out = io.StringIO()
    writer = csv.writer(out)
    writer.writerow([escape_text(h) for h in header])
    writer.writerows([_cell(v) for v in row] for row in rows)
    return out.getvalue().encode("utf-8")


def accept_items(accept: str) -> Iterator[tuple[float, int, str]]:
    """The media ranges of an ``Accept`` header (RFC 9110 section 12.5.1): ``(q, position,
    type)`` each, the type lower-cased, ``q`` 1 unless given (0 when unreadable)."""
    for position, part in enumerate(accept.split(",")):
        fields = part.strip().split(";")
        q = 1.0
        for param in fields[1:]:
            name, _, val = param.strip().partition("=")
            if name.strip() == "q":
                try:
                    q = float(val)
                except ValueError:
                    q = 0.0
        yield q, position, fields[0].strip().lower()


def wants_csv(accept: str | None) -> bool:
    """Whether an ``Accept`` header asks for CSV ahead of JSON."""
    if not accept:
        return False
    best: tuple[float, int, str] | None = None
    for q, position, kind in accept_items(accept):
        if kind in ("text/csv", "application/json", "application/*", "*/*", "text/*"):
            rank = (q, -position, kind)
            if best is None or rank[:2] > best[:2]:
                best = rank
    return best is not None and best[2] in ("text/csv", "text/*") and best[0] > 0
