"""Residual normality: the Jarque-Bera test on population moments."""

from __future__ import annotations

import numpy as np

from ..batch import Residuals
from ..registry import CheckDef, CheckPolicy, Finding, Option, fmt
from ..results import CheckResult, skip_reasons_and_ran
from ..tails import chi2_sf

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


# ------------------------------------------------------------------------------- declarations


def _jarque_bera_found(f: Finding) -> str:
    return (
        f"residuals are not normal (Jarque-Bera = {fmt(f.statistic)}, skewness "
        f"{fmt(float(f.detail('skewness')), 2)}, kurtosis {fmt(float(f.detail('kurtosis')), 3)}, "
        f"{f.p_text()})"
    )


CHECKS = (
    CheckDef(
        name="jarque_bera",
        title="Jarque-Bera normality",
        kind="test",
        position=60,
        family="normality",
        needs_holdout=False,
        tests="residual normality from skewness and kurtosis (population moments)",
        null_hypothesis="the residuals are normally distributed",
        defaults="at least 8 residuals; chi-square with 2 df",
        details=("skewness", "kurtosis", "excess_kurtosis", "df"),
        source="Jarque & Bera (1980), Economics Letters 6:255-259",
        run=lambda inputs, **options: jarque_bera(inputs.residuals, **options),
        # Useful but not essential: warn only.
        rule=CheckPolicy(warn_p=0.01),
        passed="no evidence against normal residuals",
        found=_jarque_bera_found,
        meaning=("intervals that assume normal errors may be off; prefer bootstrapped intervals"),
        options=(Option("min_obs"),),
    ),
)
