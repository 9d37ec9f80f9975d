"""Vectorised number and timestamp arrays: per array, never a Python loop per value.

A series' values are joined into one flat list whose element types are collected in one pass,
converted by numpy in one call, and checked (non-finite values, magnitude, timestamp order) with
array operations; only when something is wrong is the offending row searched for its position.
"""

from __future__ import annotations

import warnings
from collections.abc import Sequence
from datetime import datetime
from itertools import chain
from typing import Any

import numpy as np

from .request import MAX_ABS_VALUE, MAX_ERRORS, Errors, FlatRows, NonFinite, describe

_NUMBER_TYPES = frozenset({float, int, type(None)})


def _locate_bad(row: Sequence[Any]) -> tuple[int, Any] | None:
    for j, v in enumerate(row):
        if type(v) not in _NUMBER_TYPES:
            return j, v
        if type(v) is int and abs(v) > 1.7e308:
            return j, NonFinite(str(v))
    return None


def flat_numbers(
    rows: Sequence[Sequence[Any]], locs: Sequence[str], errs: Errors
) -> FlatRows | None:
    """Join ``rows`` into one float array (``None`` -> NaN) with the row lengths.

    Reports a non-number (string, boolean, object, NaN literal, overflow) or a magnitude beyond
    :data:`MAX_ABS_VALUE` with its location, and then returns ``None``.
    """
    lengths = np.fromiter(map(len, rows), dtype=np.int64, count=len(rows))
    arr = _as_floats(rows, lengths)
    if arr is None:
        _report_non_numbers(rows, locs, errs)
        return None
    if arr.size and not np.isfinite(arr[~np.isnan(arr)]).all():
        for i, j in _positions(np.isinf(arr), lengths):
            errs.add(locs[i], f"value at index {j} overflows a 64-bit float")
        return None
    flat = FlatRows(arr, lengths)
    return flat if check_magnitude(flat, locs, errs) else None


def _as_floats(rows: Sequence[Sequence[Any]], lengths: np.ndarray) -> np.ndarray | None:
    """The rows as one float array, or ``None`` when a value is not a number or null."""
    types = set(map(type, chain.from_iterable(rows)))
    if not types <= _NUMBER_TYPES:
        return None
    try:
        if type(None) in types:  # None becomes NaN on the way through a list
            return np.array(list(chain.from_iterable(rows)), dtype=float)
        return np.fromiter(chain.from_iterable(rows), dtype=float, count=int(lengths.sum()))
    except OverflowError:
        return None


def _report_non_numbers(rows: Sequence[Sequence[Any]], locs: Sequence[str], errs: Errors) -> None:
    """Name the first value of each row that is not a number or null."""
    for row, loc in zip(rows, locs, strict=True):
        bad = _locate_bad(row)
        if bad is not None:
            j, v = bad
            if isinstance(v, NonFinite):
                errs.add(loc, f"value at index {j}: {v.describe()}")
            else:
                errs.add(loc, f"value at index {j} must be a number or null, got {describe(v)}")
            if errs.full:
                break


def check_magnitude(flat: FlatRows, locs: Sequence[str], errs: Errors) -> bool:
    """Report the values beyond :data:`MAX_ABS_VALUE` (at most :data:`MAX_ERRORS`); ``True``
    when there is none."""
    if within_bound(flat.values, MAX_ABS_VALUE):
        return True
    with np.errstate(invalid="ignore"):
        huge = np.abs(flat.values) > MAX_ABS_VALUE
    if not huge.any():
        return True
    arr = flat.values
    for (i, j), pos in zip(
        _positions(huge, flat.lengths), np.flatnonzero(huge)[:MAX_ERRORS], strict=True
    ):
        errs.add(
            locs[i],
            f"value at index {j} ({arr[pos]:g}) is beyond the accepted "
            f"magnitude of {MAX_ABS_VALUE:g}; rescale the series",
        )
    return False


def within_bound(values: np.ndarray, bound: float) -> bool:
    """Every value of ``values`` (NaN aside) at most ``bound`` in magnitude, infinities not:
    two reductions, no temporary array. ``False`` means: look closer."""
    if values.size == 0:
        return True
    with np.errstate(invalid="ignore"):
        low = float(np.fmin.reduce(values, axis=None))
        high = float(np.fmax.reduce(values, axis=None))
    return -low <= bound and high <= bound


def _positions(mask: np.ndarray, lengths: np.ndarray) -> list[tuple[int, int]]:
    """(row, index in the row) of the first :data:`MAX_ERRORS` true values of ``mask``."""
    ends = np.cumsum(lengths)
    out = []
    for pos in np.flatnonzero(mask)[:MAX_ERRORS]:
        i = int(np.searchsorted(ends, pos, side="right"))
        out.append((i, int(pos - (ends[i] - lengths[i]))))
    return out


def padded_matrix(
    flat: np.ndarray, lengths: np.ndarray, width: int | None = None, *, copy: bool = True
) -> np.ndarray:
    """Right-pad the rows of ``flat`` with NaN into an ``(n, width)`` matrix. ``copy=False``:
    when every row is full, a view of ``flat`` (for a reader that copies it anyway)."""
    width = int(lengths.max(initial=0)) if width is None else width
    if flat.size == lengths.shape[0] * width and bool((lengths == width).all()):
        full = flat.reshape(lengths.shape[0], width)  # every row full: nothing to pad
        return full.copy() if copy else full
    out = np.full((lengths.shape[0], width), np.nan)
    out[np.arange(width)[None, :] < lengths[:, None]] = flat
    return out


def check_timestamps(
    rows: Sequence[Sequence[Any] | None], locs: Sequence[str], errs: Errors
) -> None:
    """Check ISO 8601 timestamps: strings, parseable, strictly increasing within each row."""
    present = [(i, r) for i, r in enumerate(rows) if r is not None]
    if not present:
        return
    flat = list(chain.from_iterable(r for _, r in present))
    if set(map(type, flat)) - {str}:
        _report_non_strings(present, locs, errs)
        return
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            stamps = np.array(flat, dtype="datetime64[us]").astype(np.int64)
    except (ValueError, OverflowError):
        _report_unparseable(present, locs, errs)
        return
    _check_increasing(stamps, present, locs, errs)


def _report_non_strings(
    present: list[tuple[int, Sequence[Any]]], locs: Sequence[str], errs: Errors
) -> None:
    for i, r in present:
        for j, v in enumerate(r):
            if not isinstance(v, str):
                errs.add(
                    locs[i], f"value at index {j} must be an ISO 8601 string, got {describe(v)}"
                )
                break


def _report_unparseable(
    present: list[tuple[int, Sequence[Any]]], locs: Sequence[str], errs: Errors
) -> None:
    for i, r in present:
        for j, v in enumerate(r):
            try:
                datetime.fromisoformat(v)
            except ValueError:
                errs.add(
                    locs[i],
                    f"value at index {j} ({v[:40]!r}) is not an ISO 8601 date or date-time",
                )
                break
        if errs.full:
            break
    if not errs.items:  # numpy refused what Python accepts: say so plainly.
        errs.add(locs[present[0][0]], "timestamps must be ISO 8601 dates or date-times")


def _check_increasing(
    stamps: np.ndarray,
    present: list[tuple[int, Sequence[Any]]],
    locs: Sequence[str],
    errs: Errors,
) -> None:
    """Report the first step of each row that does not move forward in time."""
    lengths = np.array([len(r) for _, r in present], dtype=np.int64)
    if stamps.size < 2:
        return
    starts = np.cumsum(lengths) - lengths
    step_ok = np.diff(stamps) > 0
    boundary = np.zeros(stamps.size - 1, dtype=bool)
    inner = starts[1:] - 1
    boundary[inner[(inner >= 0) & (inner < boundary.size)]] = True
    bad = ~step_ok & ~boundary
    if not bad.any():
        return
    ends = np.cumsum(lengths)
    reported: set[int] = set()
    for pos in np.flatnonzero(bad):
        k = int(np.searchsorted(ends, pos + 1, side="right"))
        if k in reported:
            continue
        reported.add(k)
        j = int(pos + 1 - starts[k])
        errs.add(
            locs[present[k][0]],
            f"must be strictly increasing: index {j} "
            f"({present[k][1][j][:40]!r}) is not after index {j - 1}",
        )
        if errs.full:
            break
