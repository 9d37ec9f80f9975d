"""Variance of a mean along one holdout path: the long-run variance estimators the holdout tests
share.

A holdout is one forecast path from one origin, steps ``1..H``: the values along it (errors, loss
differentials, misses) are correlated and ``H`` is small. Every function here works row by row
on arrays of shape ``(rows, H)`` with a boolean mask of the observed steps, never looping over
rows. Gaps follow the core's rule: the mean uses the observed values, a lag-``k`` product only
the pairs with both values observed, and ``n`` (the divisor and the sample size in every
formula) is the number of observed values.
"""

from __future__ import annotations

import numpy as np

from .types import BoolMatrix, FloatMatrix, FloatVector, IntVector


def centred(values: FloatMatrix, observed: BoolMatrix) -> tuple[FloatMatrix, FloatVector]:
    """``(values - mean, mean)`` per row: centred values 0 where not observed, mean over the
    observed values (``NaN`` for a row with none)."""
    n = observed.sum(axis=-1)
    filled = np.where(observed, values, 0.0)
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        mean = np.where(n > 0, filled.sum(axis=-1) / np.maximum(n, 1), np.nan)
    return np.where(observed, values - mean[..., None], 0.0), mean


def autocovariances(z: FloatMatrix, n_obs: IntVector, max_lag: int) -> FloatMatrix:
    """``gamma[:, k] = sum_t z_t z_{t-k} / n`` for ``k = 0..max_lag`` on centred values ``z``
    (0 where missing, so only observed pairs count), ``n = n_obs``; lags beyond the path are 0.

    This is statsmodels' ``acovf(x, adjusted=False, demean=True, missing="conservative")``
    on a row without gaps. For the path 1, 2, 4, 3 (mean 2.5): ``gamma = 1.25, 0.1875, -0.625``.
    """
    width = z.shape[-1]
    out = np.zeros((*z.shape[:-1], max_lag + 1))
    out[..., 0] = np.vecdot(z, z)
    for k in range(1, min(max_lag, width - 1) + 1):
        out[..., k] = np.vecdot(z[..., k:], z[..., :-k])
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        return out / n_obs[..., None]


def truncated_long_run(gamma: FloatMatrix, h: IntVector) -> FloatVector:
    """Rectangular-window long-run variance ``gamma_0 + 2 sum_{k=1}^{h-1} gamma_k`` per row
    (Diebold & Mariano 1995, the ``h - 1`` autocovariances an optimal ``h``-step forecast's
    errors carry). Can be negative. For the path above: ``h = 2`` gives 1.625."""
    k = np.arange(gamma.shape[-1])
    weights = np.where(k == 0, 1.0, np.where(k < np.asarray(h)[..., None], 2.0, 0.0))
    return (weights * gamma).sum(axis=-1)


def bartlett_long_run(gamma: FloatMatrix, lags: IntVector) -> FloatVector:
    """Newey-West (Bartlett) long-run variance ``gamma_0 + 2 sum_{j=1}^{L} (1 - j/(L+1))
    gamma_j`` per row (Newey & West 1987); never negative. For the path above: ``L = 1`` gives
    1.4375."""
    j = np.arange(gamma.shape[-1])
    lags = np.asarray(lags)[..., None]
    weights = np.where(j == 0, 1.0, np.where(j <= lags, 2.0 * (1.0 - j / (lags + 1.0)), 0.0))
    return (weights * gamma).sum(axis=-1)


def ewc_long_run(
    z: FloatMatrix, observed: BoolMatrix, n_obs: IntVector, b: IntVector
) -> FloatVector:
    """Equal-weighted cosine (EWC) long-run variance per row (Lazarus, Lu, Stock & Stock 2018,
    JBES 36:541-559, eq. 6): ``Omega = (1/B) sum_{j=1}^{B} Lambda_j^2`` with
    ``Lambda_j = sqrt(2/n) sum_{t=1}^{n} cos(pi j (t - 1/2) / n) z_t``. With it,
    ``mean / sqrt(Omega / n)`` is referred to Student's t with ``B`` degrees of freedom
    (fixed-b asymptotics). Gaps are closed up: the observed steps are taken in order as
    ``t = 1..n``. The cosines of ``j >= 1`` sum to 0 over ``t``, so the result does not depend
    on the centring. For the path above: ``B = 1`` gives
    ``2 + sqrt(2)``.
    """
    b = np.asarray(b, dtype=np.int64)
    rank = np.cumsum(observed, axis=-1) - 1  # 0-based position among the observed steps
    n = np.maximum(n_obs, 1).astype(float)[..., None]
    x = np.where(observed, (rank + 0.5) / n, 0.0)
    total = np.zeros(z.shape[:-1])
    for j in range(1, int(b.max(initial=0)) + 1):
        lam = np.sqrt(2.0 / n[..., 0]) * np.vecdot(np.cos(np.pi * j * x), z)
        total += np.where(j <= b, lam * lam, 0.0)
    with np.errstate(invalid="ignore", divide="ignore"):
        return total / b


def ewc_degrees(n_obs: IntVector | int) -> IntVector:
    """Number of cosine terms ``B = max(1, floor(0.4 n^(2/3)))``, Lazarus, Lu, Stock & Stock's
    (2018) rule (their ``nu = 0.4 T^(2/3)``, from memory of the paper). ``n = 6, 12, 24``
    give 1, 2, 3."""
    n = np.asarray(n_obs, dtype=float)
    return np.maximum(np.floor(0.4 * n ** (2.0 / 3.0)), 1).astype(np.int64)
