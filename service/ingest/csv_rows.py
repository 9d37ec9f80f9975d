"""The data rows of a CSV upload, grouped by series into :class:`ReadSeries`.

The ``csv`` reader hands the rows over in chunks of :data:`CHUNK_ROWS`. A chunk whose rows are
all sound (the header's width, an id, a known part, numbers or empty cells, no bound on a train
row) is taken whole, column by column, with array operations. From the first chunk that is not,
the rows are read one at a time, as they must be to report each problem with its line
(``line[N].column``, line 1 is the header) and to stop once :data:`MAX_ERRORS` are found. Both
ways give the same series: in the order of their first rows, each series' rows in file order.
"""

from __future__ import annotations

import csv
import math
from collections.abc import Iterator
from dataclasses import dataclass
from functools import cached_property
from itertools import chain, islice

import numpy as np

from .request import MAX_NAME_LENGTH, Errors, RequestUnparseable, quote

CHUNK_ROWS = 20_000
"""Rows taken at a time by the array path."""

_PARTS = frozenset({"", "train", "holdout"})


@dataclass(frozen=True)
class Columns:
    """Where each column of the upload is (``None``: an optional column left out)."""

    width: int
    series_id: int
    actual: int
    fitted: int
    timestamp: int | None
    part: int | None
    lower: int | None
    upper: int | None

    @cached_property
    def numbers(self) -> tuple[tuple[str, int | None], ...]:
        """The numeric columns, by name, in the order a row is read."""
        return (
            ("actual", self.actual),
            ("fitted", self.fitted),
            ("lower", self.lower),
            ("upper", self.upper),
        )


@dataclass(frozen=True, eq=False)
class ReadSeries:
    """Every series of an upload as read. Train rows: ``actual``, ``fitted`` (flat, series by
    series) and each series' count; holdout rows: ``h_actual``, ``h_forecast``, ``lower``,
    ``upper``. NaN where a cell is empty. The stamps of each series' rows, ``None`` without a
    timestamp column."""

    ids: list[str]
    t_lengths: np.ndarray
    actual: np.ndarray
    fitted: np.ndarray
    t_stamps: list[list[str]] | None
    h_lengths: np.ndarray
    h_actual: np.ndarray
    h_forecast: np.ndarray
    lower: np.ndarray
    upper: np.ndarray
    h_stamps: list[list[str]] | None

    @cached_property
    def h_series(self) -> np.ndarray:
        """The series of each holdout row."""
        return np.repeat(np.arange(len(self.ids)), self.h_lengths)

    @cached_property
    def interval(self) -> np.ndarray:
        """Whether a series has a bound on some holdout row."""
        given = ~np.isnan(self.lower) | ~np.isnan(self.upper)
        return np.bincount(self.h_series[given], minlength=len(self.ids)) > 0

    @cached_property
    def uneven_bounds(self) -> np.ndarray:
        """Whether a series has a holdout row with one bound and not the other."""
        uneven = np.isnan(self.lower) != np.isnan(self.upper)
        return np.bincount(self.h_series[uneven], minlength=len(self.ids)) > 0


def read_rows(reader: Iterator[list[str]], cols: Columns, errs: Errors) -> ReadSeries:
    """Every data row after the header, grouped by series; problems go to ``errs``."""
    table = _Table(cols)
    while True:
        chunk, failure = _next_chunk(reader)
        if failure is None and table.take(chunk):
            if len(chunk) < CHUNK_ROWS:
                return table.series()
            continue
        groups = table.groups()
        _read_one_by_one(_replay(chunk, failure, reader), table.lines, cols, groups, errs)
        return _from_groups(groups, with_stamps=cols.timestamp is not None)


def _next_chunk(reader: Iterator[list[str]]) -> tuple[list[list[str]], csv.Error | None]:
    """Up to :data:`CHUNK_ROWS` rows, and the reader's error if it stopped on one."""
    chunk: list[list[str]] = []
    try:
        for row in islice(reader, CHUNK_ROWS):
            chunk.append(row)
    except csv.Error as exc:
        return chunk, exc
    return chunk, None


def _replay(
    chunk: list[list[str]], failure: csv.Error | None, reader: Iterator[list[str]]
) -> Iterator[list[str]]:
    """The rows of ``chunk`` again, then the reader's error or the rest of its rows."""
    yield from chunk
    if failure is not None:
        raise failure
    yield from reader


def _blank(row: list[str]) -> bool:
    return not row or (len(row) == 1 and not row[0].strip())


class _Table:
    """The sound chunks taken so far, kept as arrays, row by row in file order."""

    def __init__(self, cols: Columns) -> None:
        self.cols = cols
        self.index: dict[str, int] = {}  # series id -> its place, in the order of first rows
        self.lines = 1  # lines read, the header included
        self.series_of: list[np.ndarray] = []
        self.holdout: list[np.ndarray] = []
        self.values: list[np.ndarray] = []  # (rows, 4): actual, fitted, lower, upper
        self.stamps: list[str] = []

    def take(self, chunk: list[list[str]]) -> bool:
        """Take ``chunk`` if every row in it is sound; ``False`` leaves the table as it was."""
        cols = self.cols
        rows = [r for r in chunk if len(r) == cols.width]
        if len(rows) < len(chunk) and not all(_blank(r) for r in chunk if len(r) != cols.width):
            return False
        if rows:
            taken = _sound_rows(rows, cols, self.index)
            if taken is None:
                return False
            ids, new_ids, holdout, values, stamps = taken
            for sid in new_ids:
                self.index[sid] = len(self.index)
            place = map(self.index.__getitem__, ids)
            self.series_of.append(np.fromiter(place, dtype=np.int64, count=len(ids)))
            self.holdout.append(holdout)
            self.values.append(values)
            self.stamps.extend(stamps)
        self.lines += len(chunk)
        return True

    def _arrays(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        if not self.values:
            return np.zeros(0, np.int64), np.zeros(0, bool), np.zeros((0, 4))
        return (
            np.concatenate(self.series_of),
            np.concatenate(self.holdout),
            np.concatenate(self.values),
        )

    def series(self) -> ReadSeries:
        """The rows taken, grouped by series."""
        series_of, holdout, values = self._arrays()
        n = len(self.index)
        with_stamps = self.cols.timestamp is not None
        train_rows = _grouped(np.flatnonzero(~holdout), series_of)
        hold_rows = _grouped(np.flatnonzero(holdout), series_of)
        t_len = np.bincount(series_of[train_rows], minlength=n)
        h_len = np.bincount(series_of[hold_rows], minlength=n)
        return ReadSeries(
            ids=list(self.index),
            t_lengths=t_len,
            actual=values[train_rows, 0],
            fitted=values[train_rows, 1],
            t_stamps=_split([self.stamps[i] for i in train_rows], t_len) if with_stamps else None,
            h_lengths=h_len,
            h_actual=values[hold_rows, 0],
            h_forecast=values[hold_rows, 1],
            lower=values[hold_rows, 2],
            upper=values[hold_rows, 3],
            h_stamps=_split([self.stamps[i] for i in hold_rows], h_len) if with_stamps else None,
        )

    def groups(self) -> dict[str, Group]:
        """The rows taken as :class:`Group` objects, for reading on one row at a time."""
        series_of, holdout, values = self._arrays()
        groups = [Group() for _ in self.index]
        stamps = self.stamps or [""] * len(series_of)
        for i, is_holdout, numbers, stamp in zip(
            series_of.tolist(), holdout.tolist(), values.tolist(), stamps, strict=True
        ):
            groups[i].add(numbers, stamp, holdout=is_holdout)
        return dict(zip(self.index, groups, strict=True))


def _sound_rows(
    rows: list[list[str]], cols: Columns, index: dict[str, int]
) -> tuple[list[str], list[str], np.ndarray, np.ndarray, list[str]] | None:
    """(series ids, those not in ``index``, holdout flags, numbers, stamps) of ``rows`` (all
    of the header's width), or ``None`` when a row has a problem to report."""
    ids = [r[cols.series_id].strip() for r in rows]
    if "" in ids:
        return None
    new_ids = [sid for sid in dict.fromkeys(ids) if sid not in index]
    if any(len(sid) > MAX_NAME_LENGTH or "\x00" in sid for sid in new_ids):
        return None
    holdout = np.zeros(len(rows), dtype=bool)
    if cols.part is not None:
        parts = [r[cols.part].strip() for r in rows]
        if not _PARTS.issuperset(parts):
            return None
        holdout = np.fromiter(map("holdout".__eq__, parts), dtype=bool, count=len(rows))
    values = np.full((len(rows), 4), math.nan)
    for slot, (_name, k) in enumerate(cols.numbers):
        if k is not None:
            got = _numbers([r[k] for r in rows])
            if got is None:
                return None
            values[:, slot] = got
    if np.isfinite(values[~holdout, 2:]).any():  # a bound on a train row
        return None
    k = cols.timestamp
    stamps = [] if k is None else [r[k].strip() for r in rows]
    return ids, new_ids, holdout, values, stamps


def _numbers(cells: list[str]) -> np.ndarray | None:
    """The cells as numbers (NaN where empty), or ``None`` when one is not a finite number."""
    texts = list(map(str.strip, cells))
    try:
        values = np.array([float(t) if t else math.nan for t in texts], dtype=float)
    except ValueError:
        return None
    if np.count_nonzero(~np.isfinite(values)) != texts.count(""):
        return None
    return values


def _grouped(rows: np.ndarray, series_of: np.ndarray) -> np.ndarray:
    """``rows`` ordered by series, file order kept within each."""
    return rows[np.argsort(series_of[rows], kind="stable")]


def _split(items: list[str], lengths: np.ndarray) -> list[list[str]]:
    """``items`` cut into consecutive pieces of ``lengths``."""
    ends = np.cumsum(lengths)
    return [items[a:b] for a, b in zip((ends - lengths).tolist(), ends.tolist(), strict=True)]


# --- one row at a time -------------------------------------------------------------------------


class Group:
    """The rows of one series read one at a time: train values and stamps, holdout values and
    stamps (NaN where a cell is empty)."""

    __slots__ = (
        "actuals",
        "fitted",
        "h_actuals",
        "h_forecasts",
        "h_stamps",
        "lower",
        "stamps",
        "upper",
    )

    def __init__(self) -> None:
        self.actuals: list[float] = []
        self.fitted: list[float] = []
        self.stamps: list[str] = []
        self.h_actuals: list[float] = []
        self.h_forecasts: list[float] = []
        self.lower: list[float] = []
        self.upper: list[float] = []
        self.h_stamps: list[str] = []

    def add(self, numbers: list[float], stamp: str, *, holdout: bool) -> None:
        """One row's actual, fitted (the forecast on a holdout row), lower, upper, stamp."""
        actual, fitted, lower, upper = numbers
        if holdout:
            self.h_actuals.append(actual)
            self.h_forecasts.append(fitted)
            self.lower.append(lower)
            self.upper.append(upper)
            self.h_stamps.append(stamp)
        else:
            self.actuals.append(actual)
            self.fitted.append(fitted)
            self.stamps.append(stamp)


def _read_one_by_one(
    rows: Iterator[list[str]], line: int, cols: Columns, groups: dict[str, Group], errs: Errors
) -> None:
    """Add ``rows`` (the first is line ``line + 1``) to ``groups``, reporting each problem;
    stops once the error list is full."""
    try:
        for row in rows:
            line += 1
            if _read_row(row, line, cols, groups, errs) and errs.full:
                break
    except csv.Error as exc:
        raise RequestUnparseable(
            [{"loc": f"line[{line + 1}]", "message": f"malformed CSV: {exc}"}]
        ) from None


def _read_row(
    row: list[str], line: int, cols: Columns, groups: dict[str, Group], errs: Errors
) -> bool:
    """Add one row to its series. ``True`` when the row was taken or refused for its width:
    the reading stops there once the error list is full."""
    if _blank(row):
        return False
    if len(row) != cols.width:
        errs.add(f"line[{line}]", f"has {len(row)} cells, the header has {cols.width}")
        return True
    sid = row[cols.series_id].strip()
    if not sid:
        errs.add(
            f"line[{line}].series_id",
            f"must be a non-empty string, got an empty string at data row {line - 1}",
        )
        return False
    part = row[cols.part].strip() if cols.part is not None else ""
    if part not in _PARTS:
        errs.add(f"line[{line}].part", f"must be train or holdout, got {quote(part)}")
        return False
    g = groups.get(sid)
    if g is None:
        if len(sid) > MAX_NAME_LENGTH or "\x00" in sid:
            errs.add(
                f"line[{line}].series_id",
                f"must be at most {MAX_NAME_LENGTH} characters, without NUL",
            )
            return False
        g = groups[sid] = Group()
    numbers = _row_numbers(row, line, cols, errs)
    stamp = row[cols.timestamp].strip() if cols.timestamp is not None else ""
    holdout = part == "holdout"
    if not holdout and (
        (cols.lower is not None and row[cols.lower].strip())
        or (cols.upper is not None and row[cols.upper].strip())
    ):
        errs.add(f"line[{line}].lower", "lower and upper belong on holdout rows only")
    g.add(numbers, stamp, holdout=holdout)
    return True


def _row_numbers(row: list[str], line: int, cols: Columns, errs: Errors) -> list[float]:
    """The row's actual, fitted, lower and upper (NaN where empty or refused)."""
    out = [math.nan, math.nan, math.nan, math.nan]
    for slot, (name, k) in enumerate(cols.numbers):
        cell = row[k].strip() if k is not None else ""
        if not cell:  # empty: a missing value
            continue
        try:
            value = float(cell)
        except ValueError:
            value = math.nan
        if value - value == 0.0:  # finite (NaN and infinities give NaN)
            out[slot] = value
        else:
            errs.add(f"line[{line}].{name}", f"must be a finite number or empty, got {_cell(cell)}")
    return out


def _cell(cell: str) -> str:
    """A refused number cell as an error quotes it, with a hint for a decimal comma."""
    shown = quote(cell)
    try:
        float(cell.replace(",", ".", 1))
    except ValueError:
        return shown
    return f"{shown} (a decimal comma? write numbers with a point, e.g. 12.5)"


def _from_groups(groups: dict[str, Group], *, with_stamps: bool) -> ReadSeries:
    gs = list(groups.values())

    def flat(name: str, lengths: np.ndarray) -> np.ndarray:
        values = chain.from_iterable(getattr(g, name) for g in gs)
        return np.fromiter(values, dtype=float, count=int(lengths.sum()))

    t_len = np.fromiter((len(g.actuals) for g in gs), dtype=np.int64, count=len(gs))
    h_len = np.fromiter((len(g.h_actuals) for g in gs), dtype=np.int64, count=len(gs))
    return ReadSeries(
        ids=list(groups),
        t_lengths=t_len,
        actual=flat("actuals", t_len),
        fitted=flat("fitted", t_len),
        t_stamps=[g.stamps for g in gs] if with_stamps else None,
        h_lengths=h_len,
        h_actual=flat("h_actuals", h_len),
        h_forecast=flat("h_forecasts", h_len),
        lower=flat("lower", h_len),
        upper=flat("upper", h_len),
        h_stamps=[g.h_stamps for g in gs] if with_stamps else None,
    )
