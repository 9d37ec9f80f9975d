"""Row rearrangements of residual matrices shared by the residual statistics.

Every function here works on whole matrices (rows = series) without a Python loop over rows.
"""

from __future__ import annotations

import numpy as np

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


def pack_observed(values: FloatMatrix, observed: BoolMatrix) -> FloatMatrix:
    """The observed entries of each row moved to its left end in their order, 0 after them.

    Row ``i`` of the result holds the ``n_obs[i]`` observed values of row ``i`` in columns
    ``0..n_obs[i] - 1``: gaps are closed up, as for a statistic taken over the observed values
    in their order.
    """
    out = np.zeros(values.shape)
    n_rows, width = values.shape
    step = max(1, CHUNK_ELEMENTS // max(width, 1))
    for lo in range(0, n_rows, step):  # blocks of rows: bounded temporaries
        hi = min(lo + step, n_rows)
        obs = observed[lo:hi]
        rows, cols = np.nonzero(obs)
        # Rank of each observed value within its row: its column in the packed matrix.
        rank = np.cumsum(obs, axis=1)[rows, cols] - 1
        out[lo + rows, rank] = values[lo + rows, cols]
    return out


def align_left(values: FloatMatrix, start: IntVector, fill: float = 0.0) -> FloatMatrix:
    """Each row shifted left by ``start[i]`` columns (its first observed value to column 0),
    ``fill`` in the columns freed on the right. Interior gaps stay where they are relative to
    the start."""
    width = values.shape[1]
    cols = np.asarray(start)[:, None] + np.arange(width)[None, :]
    inside = cols < width
    out = np.take_along_axis(values, np.where(inside, cols, 0), axis=1)
    return np.where(inside, out, fill)


def rank_from_end(observed: BoolMatrix) -> np.ndarray:
    """Rank of each observed value counted from the end of its row (1 is the last observed);
    0 after the last observed value, and the rank of the next observed value at a gap."""
    return np.cumsum(observed[:, ::-1], axis=1)[:, ::-1]
