"""Error control across series: Benjamini-Hochberg adjusted p-values."""

from __future__ import annotations

import numpy as np

from .types import FloatMatrix, FloatVector, InputError

ROWS_ELEMENTS = 1 << 20
"""Values adjusted at a time by :func:`benjamini_hochberg_rows` (whole rows)."""


def benjamini_hochberg(p_values: FloatVector) -> FloatVector:
    """Benjamini-Hochberg (1995) adjusted p-values; ``NaN`` entries are left out and kept.

    ``p_adj_(i) = min_{j >= i} min(1, m p_(j) / j)`` over the ``m`` non-missing p-values in
    ascending order. Rejecting where ``p_adj <= q`` controls the false discovery rate at ``q``
    (independent or positively dependent tests). Equals scipy's
    ``stats.false_discovery_control(p, method="bh")`` on the non-missing entries.
    """
    p = np.asarray(p_values, dtype=float)
    if p.ndim != 1:
        raise InputError("p_values", f"must be 1-D, got {p.ndim}-D")
    if ((p < 0) | (p > 1)).any():
        raise InputError("p_values", "must lie in [0, 1]")
    return benjamini_hochberg_rows(p[None, :])[0]


def benjamini_hochberg_rows(p: FloatMatrix) -> FloatMatrix:
    """:func:`benjamini_hochberg` applied to each row of ``p`` on its own (one family of
    tests per row), for p-values already known to lie in ``[0, 1]`` or be ``NaN``."""
    width = p.shape[1]
    if width == 0:
        return np.full(p.shape, np.nan)
    out = np.empty(p.shape)
    # Rows in groups of about ROWS_ELEMENTS values: the sort's work arrays stay bounded for a
    # fleet of many series, and many short rows (one per small part) still go at once.
    step = max(1, ROWS_ELEMENTS // width)
    for lo in range(0, p.shape[0], step):
        part = p[lo : lo + step]
        m = width - np.isnan(part).sum(axis=1)
        # NaN sorts last, so the m non-missing p-values of a row lead it in ascending order.
        order = np.argsort(part, axis=1, kind="stable")
        row = np.arange(part.shape[0])[:, None]
        ranked = part[row, order] * m[:, None] / np.arange(1, width + 1)
        # Running minimum from the largest rank down; fmin passes over the trailing NaNs.
        adjusted = np.minimum(np.fmin.accumulate(ranked[:, ::-1], axis=1)[:, ::-1], 1.0)
        out[lo : lo + step][row, order] = adjusted
    return out
