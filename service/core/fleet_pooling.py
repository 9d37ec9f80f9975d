"""One number for the fleet: a weighted mean over series with a cross-series variance.

The holdout of one series is too short to say much; the fleet's series together say more. The
pooled statistics (relative accuracy, bias, coverage) are weighted means of one value per
series whose variance is estimated from the spread of those values across series. The series
are taken as independent: a shock common to many series (a holiday, a price change) in the
holdout makes the fleet's values move together, and no variance computed from one origin can
see it. Each series' own path may be as correlated as it likes.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .tails import t_ppf, t_sf_two_sided
from .types import FloatVector, InputError


@dataclass(frozen=True, eq=False)
class PooledMean:
    """A weighted mean over series with its t interval.

    ``estimate`` and ``std_error`` are ``NaN`` (and ``p_value`` too) when fewer than 2 series
    are used; ``n_series`` counts them; ``df = n_series - 1``.
    """

    estimate: float
    std_error: float
    ci_low: float
    ci_high: float
    level: float
    statistic: float
    p_value: float
    n_series: int
    df: int


def pooled_mean(
    values: FloatVector,
    weights: FloatVector,
    *,
    null: float = 0.0,
    level: float = 0.95,
) -> PooledMean:
    """Weighted mean ``m = sum w_i x_i / sum w_i`` over the series with a finite value and a
    positive weight, with the heteroskedasticity-robust (HC1) variance of a weighted least
    squares intercept: ``Var(m) = G / (G - 1) * sum w_i^2 (x_i - m)^2 / (sum w_i)^2`` over the
    ``G`` series used (White 1980; MacKinnon & White 1985). With equal weights it is
    ``s^2 / G``, the ordinary t interval. It equals statsmodels'
    ``WLS(x, 1, weights=w).fit(cov_type="HC1")`` standard error.

    ``t = (m - null) / SE`` with a two-sided p-value from Student's t with ``G - 1`` degrees
    of freedom; the interval is ``m +- t_{(1 + level)/2, G-1} SE``. Values 1, 2, 3, 6 with
    weights 1, 1, 1, 1 give ``m = 3``, ``SE = sqrt(14 / 12)``.
    """
    if not 0 < level < 1:
        raise InputError("level", f"must lie strictly between 0 and 1, got {level}")
    x = np.asarray(values, dtype=float)
    w = np.asarray(weights, dtype=float)
    use = np.isfinite(x) & np.isfinite(w) & (w > 0)
    g = int(use.sum())
    if g < 2:
        nan = float("nan")
        est = float(x[use][0]) if g == 1 else nan
        return PooledMean(est, nan, nan, nan, level, nan, nan, g, max(g - 1, 0))
    # Weights are rescaled to a largest of 1 (the mean and its variance do not change).
    wu = w[use] / w[use].max()
    xu = x[use]
    total = wu.sum()
    m = float((wu * xu).sum() / total)
    resid = xu - m
    var = g / (g - 1) * float((wu * wu * resid * resid).sum()) / total**2
    se = float(np.sqrt(var))
    df = g - 1
    with np.errstate(divide="ignore", invalid="ignore"):
        t = (m - null) / se if se > 0 else float(np.sign(m - null) * np.inf if m != null else 0.0)
    q = float(t_ppf(0.5 + level / 2.0, df))
    p = float(t_sf_two_sided(np.asarray(t), df))
    return PooledMean(m, se, m - q * se, m + q * se, level, float(t), p, g, df)
