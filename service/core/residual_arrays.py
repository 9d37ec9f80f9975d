"""Row rearrangements of residual matrices shared by the residual statistics.

Every function here works on whole matrices (rows = series) without a Python loop over rows.
"""

from __future__ import annotations

from collections.abc import Iterator
from itertools import pairwise

import numpy as np
from numpy.lib.stride_tricks import sliding_window_view

from .batch import Residuals, make_batch, residuals_of
from .types import BoolMatrix, FloatMatrix, IntVector

CHUNK_ELEMENTS = 1 << 18
"""Entries per block of rows in the row rearrangements (bounded temporaries)."""


def as_residuals(x: Residuals | FloatMatrix) -> Residuals:
    """``x`` itself if it is :class:`Residuals`, else the residuals of the 2-D matrix ``x``
    (rows = series, ``NaN`` = missing or right padding) under the rules of
    :mod:`service.core.batch`: a leading ``NaN`` is before the span, an interior one a gap."""
    if isinstance(x, Residuals):
        return x
    e = np.asarray(x, dtype=float)
    if e.ndim == 1:
        e = e[None, :]
    # actual = e and fitted = 0 where e is observed: the residual is e, missing where e is.
    return residuals_of(make_batch(e, np.where(np.isnan(e), np.nan, 0.0)))


def packed_chunks(
    values: FloatMatrix,
    n_obs: IntVector,
    start: IntVector,
    contiguous: np.ndarray,
    observed: BoolMatrix | None = None,
    max_elements: int = CHUNK_ELEMENTS,
) -> Iterator[tuple[slice | IntVector, FloatMatrix, IntVector]]:
    """Chunks ``(rows, block, n)`` of the rows with ``n_obs > 0``: row ``k`` of ``block`` holds
    the observed values of row ``rows[k]`` in their order (gaps closed up) in its first
    ``n[k] = n_obs[rows[k]]`` columns, anything after them.

    ``contiguous[i]`` says the observed values of row ``i`` are the ``n_obs[i]`` columns from
    ``start[i]`` on (no gap): those rows are copied whole from their start (a view when every
    row is alike, the usual fleet), in chunks of their own; ``observed`` locates the values
    of the other rows. ``rows`` is a slice or an index array, in ascending ``n_obs`` within a
    chunk; blocks have at most ``max_elements`` entries (one row at least), so temporaries
    stay bounded. No loop over rows: a chunk is a few whole-array operations.
    """
    n_obs = np.asarray(n_obs, dtype=np.int64)
    start = np.asarray(start, dtype=np.int64)
    contiguous = np.asarray(contiguous, dtype=bool)
    n_rows, width = values.shape
    if n_rows == 0 or width == 0:
        return
    if (n_obs == n_obs[0]).all() and (start == start[0]).all() and contiguous.all():
        n, s = int(n_obs[0]), int(start[0])
        step = max(1, max_elements // max(n, 1))
        for lo in range(0, n_rows if n > 0 else 0, step):
            hi = min(lo + step, n_rows)
            yield slice(lo, hi), values[lo:hi, s : s + n], n_obs[lo:hi]
        return
    flat = values.reshape(-1)  # a view for the C-ordered matrices of the core
    order = np.argsort(n_obs, kind="stable")
    order = order[n_obs[order] > 0]
    step = max(1, max_elements // width)
    alike = contiguous[order]
    for part, gap_free in ((order[alike], True), (order[~alike], False)):
        for lo in range(0, part.size, step):
            rows = part[lo : lo + step]
            n = n_obs[rows]
            top = int(n[-1])  # ascending n: the longest row of the block
            if gap_free:
                # Each row's values are the `top` entries from its start (a row with fewer is
                # followed by padding or the next row: unused).
                begin = rows * width + start[rows]
                if (begin + top <= flat.size).all():
                    yield rows, sliding_window_view(flat, top)[begin], n
                else:  # a window would run past the end of the matrix
                    cols = begin[:, None] + np.arange(top)[None, :]
                    yield rows, flat.take(cols, mode="clip"), n
                continue
            if observed is None:
                raise ValueError("rows with gaps need the observed mask")
            # Row-major order of np.nonzero: each row's observed columns, in order.
            r, c = np.nonzero(observed[rows])
            first = np.cumsum(n) - n  # where each row's entries begin in r
            block = np.zeros((rows.size, top))
            block.reshape(-1)[r * top + (np.arange(r.size) - first[r])] = flat[rows[r] * width + c]
            yield rows, block, n


def packed_blocks(
    values: FloatMatrix,
    n_obs: IntVector,
    start: IntVector,
    contiguous: np.ndarray,
    observed: BoolMatrix | None = None,
    max_elements: int = CHUNK_ELEMENTS,
) -> Iterator[tuple[slice | IntVector, FloatMatrix]]:
    """:func:`packed_chunks` split into blocks ``(rows, block)`` of rows with the same number
    ``n`` of observed values, ``block`` of shape ``(len(rows), n)``: every row with
    ``n_obs > 0`` comes in exactly one block. A loop over chunks and the distinct ``n`` in
    each (at most the width), never over rows."""
    for rows, block, n in packed_chunks(values, n_obs, start, contiguous, observed, max_elements):
        edges = [0, *(np.flatnonzero(np.diff(n)) + 1).tolist(), n.shape[0]]
        if len(edges) == 2:
            yield rows, block[:, : int(n[0])]
            continue
        index = np.arange(rows.start, rows.stop) if isinstance(rows, slice) else rows
        for a, b in pairwise(edges):
            yield index[a:b], block[a:b, : int(n[a])]


def residual_blocks(
    res: Residuals, max_elements: int = CHUNK_ELEMENTS
) -> Iterator[tuple[slice | IntVector, FloatMatrix]]:
    """:func:`packed_blocks` of ``res.standard``: each series' observed residuals (centred, in
    units of ``res.unit``) in their order, the series grouped by their number of residuals."""
    return packed_blocks(
        res.standard, res.n_obs, res.start, res.n_missing == 0, res.observed, max_elements
    )


def align_left(values: FloatMatrix, start: IntVector, fill: float = 0.0) -> FloatMatrix:
    """Each row shifted left by ``start[i]`` columns (its first observed value to column 0),
    ``fill`` in the columns freed on the right. Interior gaps stay where they are relative to
    the start."""
    width = values.shape[1]
    cols = np.asarray(start)[:, None] + np.arange(width)[None, :]
    inside = cols < width
    out = np.take_along_axis(values, np.where(inside, cols, 0), axis=1)
    return np.where(inside, out, fill)
