"""Error control across series: Benjamini-Hochberg adjusted p-values."""

from __future__ import annotations

import numpy as np

from .types import FloatVector, InputError


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
    out = np.full(p.shape, np.nan)
    have = np.flatnonzero(~np.isnan(p))
    m = have.size
    if m == 0:
        return out
    order = np.argsort(p[have], kind="stable")
    ranked = p[have][order] * m / np.arange(1, m + 1)
    adjusted = np.minimum(np.minimum.accumulate(ranked[::-1])[::-1], 1.0)
    out[have[order]] = adjusted
    return out
