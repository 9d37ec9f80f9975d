"""Residual normality: the Shapiro-Wilk test, with the Jarque-Bera test on population
moments beside it."""

from __future__ import annotations

import numpy as np
from scipy.special import ndtr, ndtri

from ..batch import Residuals
from ..registry import CheckDef, CheckPolicy, Finding, Option, fmt
from ..results import NONE, CheckResult, skip_reasons_and_ran
from ..tails import chi2_sf
from ..types import FloatMatrix, FloatVector

JB_MIN_OBS = 8


def jarque_bera(res: Residuals, *, min_obs: int = JB_MIN_OBS) -> CheckResult:
    """Jarque-Bera test (Jarque & Bera 1980).

    With population (biased) central moments ``m_k = mean((e - mean e)^k)``: skewness
    ``S = m_3 / m_2^{3/2}``, kurtosis ``K = m_4 / m_2^2`` (3 for a normal; ``excess_kurtosis``
    is ``K - 3``) and ``JB = T / 6 (S^2 + (K - 3)^2 / 4)``, chi-square with 2 degrees of
    freedom. Matches scipy's ``stats.jarque_bera`` and statsmodels' ``jarque_bera``.

    Skipped below ``min_obs`` residuals (default 8; the chi-square approximation is poor in
    small samples) or when the residuals are constant.
    """
    n = res.n_obs
    z = res.standard  # centred over its unit: the moment ratios are the same, never overflow
    z2 = z * z
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        m2 = z2.sum(axis=1) / n
        m3 = np.vecdot(z2, z) / n
        m4 = np.vecdot(z2, z2) / n
        skew = m3 / m2**1.5
        kurt = m4 / (m2 * m2)
        jb = n / 6.0 * (skew * skew + (kurt - 3.0) ** 2 / 4.0)
    reasons, ran = skip_reasons_and_ran(
        n.shape[0],
        (n < max(min_obs, 3), f"fewer than {max(min_obs, 3)} residuals"),
        (res.constant | ~(m2 > 0), "residuals are constant"),
    )
    jb = np.where(ran, jb, np.nan)
    return CheckResult(
        name="jarque_bera",
        kind="test",
        statistic=jb,
        p_value=chi2_sf(jb, 2),
        details={
            "skewness": np.where(ran, skew, np.nan),
            "kurtosis": np.where(ran, kurt, np.nan),
            "excess_kurtosis": np.where(ran, kurt - 3.0, np.nan),
            "df": np.full(n.shape, 2),
        },
        skip_reason=reasons,
        null_hypothesis="the residuals are normally distributed",
    )


SW_MAX_OBS = 5000
"""Largest sample for Royston's approximation; longer series are judged by Jarque-Bera, whose
chi-square reference is accurate there."""


def shapiro_wilk_w(sorted_rows: FloatMatrix, n: int) -> tuple[FloatVector, FloatVector]:
    """Shapiro-Wilk W and its p-value for rows of ``n`` sorted values each (``4 <= n <= 5000``),
    by Royston's (1992) approximation, as algorithm AS R94 (Royston 1995, Applied Statistics
    44:547-551) computes it.

    ``m_i = Phi^-1((i - 3/8) / (n + 1/4))``, ``c = m / |m|``; with ``u = 1 / sqrt(n)`` the two
    outer weights are ``a_n = c_n + 0.221157 u - 0.147981 u^2 - 2.071190 u^3 + 4.434685 u^4 -
    2.706056 u^5`` and (``n > 5``) ``a_{n-1} = c_{n-1} + 0.042981 u - 0.293762 u^2 - 1.752461
    u^3 + 5.682633 u^4 - 3.582633 u^5``, the inner ones ``m_i / sqrt(phi)`` scaled so that
    ``sum a^2 = 1``, antisymmetric. ``W = (sum a_i x_(i))^2 / sum (x - mean)^2``; for
    ``n >= 12``, ``ln(1 - W)`` is normal with mean ``0.0038915 l^3 - 0.083751 l^2 - 0.31082 l
    - 1.5861`` and sd ``exp(0.0030302 l^2 - 0.082676 l - 0.4803)``, ``l = ln n``; for
    ``4 <= n <= 11``, ``-ln(gamma - ln(1 - W))`` with ``gamma = 0.459 n - 2.273`` is normal with
    mean ``0.5440 - 0.39978 n + 0.025054 n^2 - 0.0006714 n^3`` and sd ``exp(1.3822 - 0.77857 n +
    0.062767 n^2 - 0.0020322 n^3)``. The p-value is the upper tail of that normal.
    """
    i = np.arange(1, n + 1)
    m = ndtri((i - 0.375) / (n + 0.25))
    mm = float(m @ m)
    u = 1.0 / np.sqrt(n)
    c = m / np.sqrt(mm)
    an = (
        c[-1] + 0.221157 * u - 0.147981 * u**2 - 2.071190 * u**3 + 4.434685 * u**4 - 2.706056 * u**5
    )
    a = np.empty(n)
    if n > 5:
        an1 = (
            c[-2]
            + 0.042981 * u
            - 0.293762 * u**2
            - 1.752461 * u**3
            + 5.682633 * u**4
            - 3.582633 * u**5
        )
        phi = (mm - 2 * m[-1] ** 2 - 2 * m[-2] ** 2) / (1 - 2 * an**2 - 2 * an1**2)
        a[2:-2] = m[2:-2] / np.sqrt(phi)
        a[-1], a[-2], a[0], a[1] = an, an1, -an, -an1
    else:
        phi = (mm - 2 * m[-1] ** 2) / (1 - 2 * an**2)
        a[1:-1] = m[1:-1] / np.sqrt(phi)
        a[-1], a[0] = an, -an
    x = sorted_rows
    centred = x - x.mean(axis=1, keepdims=True)
    with np.errstate(invalid="ignore", divide="ignore"):
        # Row by row (vecdot), so a row gives the same bits alone or in any batch.
        w = np.vecdot(x, a[None, :]) ** 2 / np.vecdot(centred, centred)
    w = np.minimum(w, 1.0)
    with np.errstate(invalid="ignore", divide="ignore"):
        if n >= 12:
            ln_n = np.log(n)
            mu = 0.0038915 * ln_n**3 - 0.083751 * ln_n**2 - 0.31082 * ln_n - 1.5861
            sigma = np.exp(0.0030302 * ln_n**2 - 0.082676 * ln_n - 0.4803)
            z = (np.log1p(-w) - mu) / sigma
        else:
            gamma = 0.459 * n - 2.273
            mu = 0.5440 - 0.39978 * n + 0.025054 * n**2 - 0.0006714 * n**3
            sigma = np.exp(1.3822 - 0.77857 * n + 0.062767 * n**2 - 0.0020322 * n**3)
            z = (-np.log(gamma - np.log1p(-w)) - mu) / sigma
    return w, ndtr(-z)


def normality(res: Residuals, *, min_obs: int = JB_MIN_OBS) -> CheckResult:
    """Normality of the residuals: the Shapiro-Wilk test (Shapiro & Wilk 1965) by Royston's
    approximation (:func:`shapiro_wilk_w`), with the Jarque-Bera figures beside it.

    Jarque-Bera's chi-square reference is poor in its upper tail at the sample sizes forecasts
    have (under normal errors, ``p < 0.0004`` happens 12-16 times too often for ``T`` from 52 to
    260: measured, see the README's gate study), which is where the gate's family-wise
    thresholds sit; Royston's p-value stays within about 10% of nominal there. Series longer than
    ``SW_MAX_OBS`` are judged by Jarque-Bera (``method`` says which). ``statistic`` is W (or JB);
    ``details`` keep the skewness and kurtosis, ``jarque_bera`` and its p-value.
    """
    jb = jarque_bera(res, min_obs=min_obs)
    n = res.n_obs
    n_series = n.shape[0]
    w = np.full(n_series, np.nan)
    p = np.full(n_series, np.nan)
    ran = ~jb.skipped
    use = ran & (n >= 4) & (n <= SW_MAX_OBS)
    if use.any():
        values = np.where(res.observed, res.standard, np.inf)
        for size in np.unique(n[use]).tolist():
            rows = np.flatnonzero(use & (n == size))
            if rows.size == n_series:  # every series (the usual fleet): sorted in place
                values.sort(axis=1)
                ordered = values[:, :size]
            else:
                ordered = np.sort(values[rows], axis=1)[:, :size]
            w[rows], p[rows] = shapiro_wilk_w(ordered, size)
    statistic = np.where(use, w, jb.statistic)
    p_value = np.where(use, p, jb.p_value)
    return CheckResult(
        name="jarque_bera",
        kind="test",
        statistic=np.where(ran, statistic, np.nan),
        p_value=np.where(ran, p_value, np.nan),
        details={
            **jb.details,
            "jarque_bera": jb.statistic,
            "jarque_bera_p_value": jb.p_value,
            "method": np.where(ran, np.where(use, "shapiro-wilk", "jarque-bera"), NONE),
        },
        skip_reason=jb.skip_reason,
        null_hypothesis="the residuals are normally distributed",
    )


# ------------------------------------------------------------------------------- declarations


def _found(f: Finding) -> str:
    if f.detail("method") == "shapiro-wilk":
        test = f"Shapiro-Wilk W = {fmt(f.statistic, 4)}"
    else:
        test = f"Jarque-Bera = {fmt(f.statistic)}"
    return (
        f"residuals are not normal ({test}, skewness {fmt(float(f.detail('skewness')), 2)}, "
        f"kurtosis {fmt(float(f.detail('kurtosis')), 3)}, {f.p_text()})"
    )


CHECKS = (
    CheckDef(
        name="jarque_bera",
        title="Normality",
        kind="test",
        position=60,
        family="normality",
        needs_holdout=False,
        tests=(
            "residual normality: Shapiro-Wilk (Royston's approximation); Jarque-Bera from "
            "population skewness and kurtosis beside it"
        ),
        null_hypothesis="the residuals are normally distributed",
        defaults="at least 8 residuals; Jarque-Bera decides beyond 5,000; warn only",
        details=(
            "skewness",
            "kurtosis",
            "excess_kurtosis",
            "df",
            "jarque_bera",
            "jarque_bera_p_value",
            "method",
        ),
        source=(
            "Shapiro & Wilk (1965), Biometrika 52:591-611; Royston (1992), Statistics and "
            "Computing 2:117-119; Jarque & Bera (1980), Economics Letters 6:255-259"
        ),
        run=lambda inputs, **options: normality(inputs.residuals, **options),
        # Useful but not essential: warn only.
        rule=CheckPolicy(warn_p=0.01),
        passed="no evidence against normal residuals",
        found=_found,
        meaning="intervals that assume normal errors may be off; prefer bootstrapped intervals",
        options=(Option("min_obs"),),
    ),
)
