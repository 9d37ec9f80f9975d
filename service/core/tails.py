"""Upper-tail probabilities of the reference distributions, straight from ``scipy.special``.

The same numbers as ``scipy.stats.<dist>.sf``/``ppf`` (which call these very functions after
checking their arguments), without the per-call cost of that checking: the checks here pass
arrays whose shapes and ranges the core has already fixed. p-values always come from an upper
tail, never from ``1 - cdf``, so tiny p-values keep their precision.
"""

from __future__ import annotations

import numpy as np
from scipy.special import chdtrc, ndtr, stdtr, stdtrit


def chi2_sf(x: np.ndarray, df: np.ndarray | float) -> np.ndarray:
    """``P(X > x)`` for chi-square with ``df`` degrees of freedom (``stats.chi2.sf(x, df)``
    for ``x >= 0``; ``NaN`` stays ``NaN``)."""
    return chdtrc(df, x)


def t_sf_two_sided(t: np.ndarray, df: np.ndarray | float) -> np.ndarray:
    """``P(|T| > |t|) = 2 sf(|t|)`` for Student's t with ``df`` degrees of freedom
    (``2 * stats.t.sf(abs(t), df)``)."""
    return 2.0 * stdtr(df, -np.abs(t))


def t_sf(t: np.ndarray, df: np.ndarray | float) -> np.ndarray:
    """``P(T > t)`` for Student's t with ``df`` degrees of freedom (``stats.t.sf(t, df)``)."""
    return stdtr(df, -np.asarray(t, dtype=float))


def t_ppf(q: float | np.ndarray, df: np.ndarray | float) -> np.ndarray:
    """Quantile ``q`` of Student's t with ``df`` degrees of freedom (``stats.t.ppf(q, df)``)."""
    return stdtrit(df, q)


def norm_sf_two_sided(z: np.ndarray | float) -> np.ndarray:
    """``P(|Z| > |z|) = 2 sf(|z|)`` for the standard normal (``2 * stats.norm.sf(abs(z))``)."""
    return 2.0 * ndtr(-np.abs(z))
