"""The dialect of a CSV upload: which delimiter separates its cells, read off its header.

Spreadsheets in many locales write ``;`` between cells (their decimal separator is the comma),
and database exports often use a tab. :func:`detect_delimiter` tries ``,``, ``;`` and a tab on
the header line and keeps the one under which the most cells are column names the upload knows
(header names in any case); a tie goes to the comma. :func:`header_summary` says what was seen
when the header still lacks a required column, quoting at most a short prefix of each cell.
Standard library only: the command line uses it before it sends a file.
"""

from __future__ import annotations

import csv
import io

DELIMITERS = (",", ";", "\t")
"""The delimiters tried, in order of preference."""
_NAMES = {",": "comma", ";": "semicolon", "\t": "tab"}
HEAD_CHARS = 64 * 1024
"""At most this much of the first line is read to decide the delimiter."""


def first_line(text: str) -> str:
    """The first non-empty line of ``text`` (at most :data:`HEAD_CHARS` of it)."""
    head = text.lstrip("\r\n")[:HEAD_CHARS]
    return head.split("\n", 1)[0].rstrip("\r")


def split_header(line: str, delimiter: str) -> list[str]:
    """The cells of one header line, stripped and lower-cased (names are read in any case)."""
    try:
        cells = next(csv.reader(io.StringIO(line), delimiter=delimiter), [])
    except csv.Error:
        return []
    return [c.strip().lower() for c in cells]


def detect_delimiter(text: str, known: frozenset[str] | set[str]) -> str:
    """The delimiter under which the header line has the most ``known`` column names."""
    line = first_line(text)
    best, score = ",", -1
    for d in DELIMITERS:
        hits = len(known.intersection(split_header(line, d)))
        if hits > score:
            best, score = d, hits
    return best


def delimiter_name(delimiter: str) -> str:
    return _NAMES.get(delimiter, repr(delimiter))


def header_summary(header: list[str], delimiter: str, limit: int = 8, width: int = 40) -> str:
    """What the header was read as, short: the delimiter and the first ``limit`` cells, each
    cut to ``width`` characters. Also says when the body looks like JSON."""
    cells = []
    for c in header[:limit]:
        cells.append(repr(c) if len(c) <= width else f"{c[:width]!r}...")
    more = len(header) - limit
    listing = ", ".join(cells) + (f" and {more:,} more" if more > 0 else "")
    seen = f"the header read as {len(header):,} cell{'s' if len(header) != 1 else ''} "
    seen += f"separated by {delimiter_name(delimiter)}s: {listing or 'nothing'}"
    if header and header[0].lstrip().startswith(("{", "[")):
        seen += "; the body looks like JSON: send it with Content-Type application/json"
    else:
        others = [delimiter_name(d) for d in DELIMITERS if d != delimiter]
        seen += f" (a {', '.join(others[:-1])} or {others[-1]} was tried as well)"
    return seen
