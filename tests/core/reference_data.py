"""Batch builders shared by the core's reference tests.

The reference data sets and published values live in ``tests/reference_values.py``; the
builders here only arrange arrays into the batch layout the core expects.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from service.core import Residuals, SeriesBatch, make_batch, residuals_of


def pad_rows(rows: Sequence[Sequence[float]], width: int | None = None) -> np.ndarray:
    """Stack rows into a matrix, right-padded with NaN."""
    width = max(len(r) for r in rows) if width is None else width
    out = np.full((len(rows), width), np.nan)
    for i, r in enumerate(rows):
        out[i, : len(r)] = r
    return out


def residual_batch(
    rows: Sequence[Sequence[float]], width: int | None = None, **kwargs: object
) -> SeriesBatch:
    """A batch whose residuals are exactly ``rows``: actuals = rows, fitted = 0 where given.

    ``NaN`` inside a row becomes a missing fitted value (the actual stays observed), so the
    residual is missing there without ending the series. Rows are right-padded to ``width``.
    """
    e = pad_rows(rows, width)
    actuals = np.where(np.isnan(e), 1.0, e)
    fitted = np.where(np.isnan(e), np.nan, 0.0)
    for i, r in enumerate(rows):
        actuals[i, len(r) :] = np.nan
    return make_batch(actuals, fitted, **kwargs)  # type: ignore[arg-type]


def residuals(rows: Sequence[Sequence[float]], **kwargs: object) -> Residuals:
    return residuals_of(residual_batch(rows, **kwargs))  # type: ignore[arg-type]


def observed(x: np.ndarray) -> np.ndarray:
    """The observed values of one series (NaN dropped)."""
    x = np.asarray(x, dtype=float)
    return x[~np.isnan(x)]


def invented_rows(rng: np.random.Generator, lengths: Sequence[int], scale: float = 1.0) -> list:
    """Invented residual series of the given lengths (seeded normal noise)."""
    return [rng.normal(0.0, scale, n) for n in lengths]
