"""Heteroskedasticity-robust test of first-order autocorrelation: the regression of each
residual on the one before it, with the HC2 standard error and Bell-McCaffrey degrees of
freedom.

Regressing the residuals on their own lag and testing the slope with a heteroskedasticity-robust
standard error is common practice in econometrics for first-order serial correlation (from
memory; no single source). The small-sample parts are published: the HC2 variance of MacKinnon &
White (1985), "Some heteroskedasticity-consistent covariance matrix estimators with improved
finite sample properties", Journal of Econometrics 29(3), and the degrees of freedom of Bell &
McCaffrey (2002), "Bias reduction in standard errors for linear regression with multi-stage
samples", Survey Methodology 28(2), in the form Imbens & Kolesar (2016), "Robust standard errors
in small samples: some practical advice", Review of Economics and Statistics 98(4), recommend:
HC2 with a Student t reference on ``K_BM`` degrees of freedom.

Why it joins the portmanteau: against first-order autocorrelation, by far the commonest
structure a model leaves, the slope's own residuals estimate its variance under the
alternative as well as under the null (the portmanteau's self-normalised sums estimate
``1 + 2 rho^2`` where the lag-1 autocorrelation varies by ``1 - rho^2``), and the
Bell-McCaffrey degrees of freedom keep its far tail, where the gate's family-wise thresholds
sit, at or under its nominal rate, conservative at short T and under heavy tails (the README's
gate study).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .batch import Residuals
from .tails import t_sf_two_sided
from .types import BoolMatrix, FloatMatrix, FloatVector, IntVector

BLOCK_ELEMENTS = 1 << 16
"""Cells per block of rows: the regression's work arrays for a block stay in cache."""

LEVERAGE_TOLERANCE = 1e-10
"""A pair whose leverage ``h`` is within this of 1 is fitted exactly (its residual is 0): it
adds nothing to the HC2 variance (the limit of ``u^2 / (1 - h)``, ``u`` vanishing with
``1 - h``) nor to the degrees of freedom."""


@dataclass(frozen=True)
class LagOneRegression:
    """Per series: ``slope`` (OLS of ``e_t`` on ``1, e_{t-1}`` over the observed pairs),
    ``t`` (slope over its HC2 standard error), ``df`` (Bell-McCaffrey), ``p_value``
    (two-sided, Student t on ``df``) and ``pairs`` (observed pairs used). ``NaN`` where fewer
    than 3 pairs are observed, the earlier values of the pairs are constant, or the HC2
    variance is 0 with a slope of 0."""

    slope: FloatVector
    t: FloatVector
    df: FloatVector
    p_value: FloatVector
    pairs: IntVector


def lag_one_regression(res: Residuals) -> LagOneRegression:
    """The robust regression test of no first-order autocorrelation, every series at once:
    :func:`hc2_slope_test` of ``e_t`` on ``e_{t-1}`` over the pairs with both observed.

    The residuals enter as ``res.standard`` (centred, over their largest magnitude): ``b``,
    ``t`` and ``K_BM`` do not depend on the unit.
    """
    z = res.standard
    n_series = z.shape[0]
    if z.shape[1] < 2:
        nan = np.full(n_series, np.nan)
        return LagOneRegression(nan, nan, nan, nan, np.zeros(n_series, dtype=np.int64))
    obs = res.observed
    return hc2_slope_test(z[:, :-1], z[:, 1:], obs[:, 1:] & obs[:, :-1])


def hc2_slope_test(x: FloatMatrix, y: FloatMatrix, pairs: BoolMatrix) -> LagOneRegression:
    """Per row, the t test of the slope of ``y`` on ``1, x`` over the columns where ``pairs``
    is true, with the HC2 standard error and the Bell-McCaffrey degrees of freedom.

    Over the ``n`` pairs, with ``x~, y~`` the values less their means, ``S = sum x~^2``:

    * ``b = sum x~ y~ / S``, ``u_i = y~_i - b x~_i``, leverages ``h_i = 1/n + x~_i^2 / S``;
    * ``V_HC2 = sum_i a_i^2 u_i^2 / (1 - h_i)`` with ``a_i = x~_i / S`` (MacKinnon & White
      1985), ``t = b / sqrt(V_HC2)``;
    * ``K_BM = (sum_i lambda_i)^2 / sum_i lambda_i^2``, the ``lambda_i`` the eigenvalues of
      ``G' G`` with ``G = M D^(1/2)``, ``M = I - H`` and ``D = diag(a_i^2 / (1 - h_i))``
      (Bell & McCaffrey 2002; Imbens & Kolesar 2016, their K_BM): the Satterthwaite degrees of
      freedom of ``V_HC2`` under independent homoskedastic normal errors, computed without the
      ``n x n`` matrices as ``tr(M D M) = sum d_i (1 - h_i)`` and ``tr((M D M)^2) =
      sum d_i^2 (1 - 2 h_i) + sum_ij d_i d_j H_ij^2``, the last sum in closed form from
      ``H_ij = 1/n + x~_i x~_j / S``.

    With a binary ``x`` the HC2 variance is the unequal-variance (Welch) variance of the
    difference of the two groups' means (Imbens & Kolesar 2016), so ``t`` is Welch's statistic.
    ``NaN`` where fewer than 3 pairs are observed, ``x`` is constant over them, or the HC2
    variance is 0 with a slope of 0; a variance of 0 with a slope other than 0 gives an
    infinite ``t`` and ``p = 0``.
    """
    w = np.asarray(pairs, dtype=bool)
    n_series, width = w.shape
    out = np.empty((4, n_series))
    count = w.sum(axis=1).astype(np.int64)
    rows = max(1, BLOCK_ELEMENTS // max(width, 1))
    for lo in range(0, n_series, rows):
        part = slice(lo, min(lo + rows, n_series))
        out[:, part] = _block(x[part], y[part], w[part], count[part].astype(float))
    slope, t, df, s = out
    good = (count >= 3) & (s > 0) & np.isfinite(df) & (df > 0) & ~np.isnan(t)
    slope = np.where(good, slope, np.nan)
    t = np.where(good, t, np.nan)
    df = np.where(good, df, np.nan)
    p = np.full(n_series, np.nan)
    if good.any():
        p[good] = t_sf_two_sided(t[good], df[good])
    return LagOneRegression(slope=slope, t=t, df=df, p_value=p, pairs=count)


def _block(x: FloatMatrix, y: FloatMatrix, w: BoolMatrix, n: FloatVector) -> np.ndarray:
    """:func:`hc2_slope_test`'s slope, ``t``, ``K_BM`` and ``S`` for one block of rows."""
    on = w.astype(float)  # 1 on the pairs: products with it zero everything off them
    x = x * on
    y = y * on
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        x -= (x.sum(axis=1) / n)[:, None]
        x *= on
        y -= (y.sum(axis=1) / n)[:, None]
        y *= on
        s = np.vecdot(x, x)
        slope = np.vecdot(x, y) / s
        u = y
        u -= slope[:, None] * x  # the slope's residuals, 0 off the pairs
        x2 = x * x
        # 1 - h, h = 1/n + x~^2 / S (off the pairs x~ = 0, so their d below is 0)
        one_minus_h = x2 * (-1.0 / s)[:, None]
        one_minus_h += (1.0 - 1.0 / n)[:, None]
        d = np.divide(x2, one_minus_h)
        d *= (1.0 / (s * s))[:, None]
        exact = one_minus_h <= LEVERAGE_TOLERANCE
        if exact.any():
            d[exact] = 0.0
        u *= u
        variance = np.vecdot(d, u)
        trace = np.vecdot(d, one_minus_h)
        sum_d = d.sum(axis=1)
        d2 = d * d
        # sum d_i^2 (1 - 2 h_i) = 2 sum d_i^2 (1 - h_i) - sum d_i^2
        cross = (
            2.0 * np.vecdot(d2, one_minus_h)
            - d2.sum(axis=1)
            + sum_d * sum_d / (n * n)
            + 2.0 * np.vecdot(d, x) ** 2 / (n * s)
            + np.vecdot(d, x2) ** 2 / (s * s)
        )
        df = trace * trace / cross
        t = slope / np.sqrt(variance)
    return np.vstack((slope, t, df, s))
