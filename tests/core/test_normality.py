"""Jarque-Bera against scipy, statsmodels and published values."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats
from statsmodels.stats.stattools import jarque_bera as sm_jarque_bera

from service.core import jarque_bera
from tests.reference_values import (
    LOG_X20_SQUARED_JARQUE_BERA,
    LOG_X20_SQUARED_JARQUE_BERA_P,
    X20,
    X20_EXCESS_KURTOSIS,
    X20_JARQUE_BERA,
    X20_JARQUE_BERA_P,
    X20_KURTOSIS,
    X20_MOMENTS_ATOL,
    X20_SKEWNESS,
)

from .reference_data import observed, residuals

RTOL = 1e-8


def test_x20_published():
    # tests/reference_values.py X20_JARQUE_BERA(_P): statsmodels test_statstools.py (R fBasics).
    result = jarque_bera(residuals([X20]))
    np.testing.assert_allclose(result.statistic[0], X20_JARQUE_BERA, rtol=RTOL)
    np.testing.assert_allclose(result.p_value[0], X20_JARQUE_BERA_P, rtol=RTOL)
    # tests/reference_values.py X20_SKEWNESS, X20_KURTOSIS: same source, published to 5
    # decimals (X20_MOMENTS_ATOL = 5e-6); the excess kurtosis is the kurtosis minus 3.
    np.testing.assert_allclose(result.details["skewness"][0], X20_SKEWNESS, atol=X20_MOMENTS_ATOL)
    np.testing.assert_allclose(result.details["kurtosis"][0], X20_KURTOSIS, atol=X20_MOMENTS_ATOL)
    np.testing.assert_allclose(
        result.details["excess_kurtosis"][0], X20_EXCESS_KURTOSIS, atol=X20_MOMENTS_ATOL
    )
    assert result.details["df"][0] == 2


def test_log_x20_squared_published():
    # tests/reference_values.py LOG_X20_SQUARED_JARQUE_BERA(_P): statsmodels
    # test_statstools.py (R fBasics), log(X20^2).
    result = jarque_bera(residuals([np.log(X20**2)]))
    np.testing.assert_allclose(result.statistic[0], LOG_X20_SQUARED_JARQUE_BERA, rtol=RTOL)
    np.testing.assert_allclose(result.p_value[0], LOG_X20_SQUARED_JARQUE_BERA_P, rtol=RTOL)


def test_matches_scipy_and_statsmodels_on_mixed_batch():
    rng = np.random.default_rng(17)
    rows = [
        rng.normal(0, 1, 8),
        rng.standard_t(3, 40),
        rng.exponential(1, 100) - 1,
        rng.normal(0, 1, 156),
        rng.uniform(-1, 1, 64),
    ]
    rows[1][:2] = np.nan  # leading missing fitted values
    rows[3][[20, 21, 100]] = np.nan  # interior gaps: moments over the observed residuals
    result = jarque_bera(residuals(rows))
    for i, row in enumerate(rows):
        e = observed(row)
        ref = stats.jarque_bera(e)
        np.testing.assert_allclose(result.statistic[i], ref.statistic, rtol=RTOL)
        np.testing.assert_allclose(result.p_value[i], ref.pvalue, rtol=RTOL)
        jb, p, skew, kurt = sm_jarque_bera(e)
        np.testing.assert_allclose(result.statistic[i], jb, rtol=RTOL)
        np.testing.assert_allclose(result.p_value[i], p, rtol=RTOL)
        np.testing.assert_allclose(result.details["skewness"][i], skew, rtol=RTOL)
        np.testing.assert_allclose(result.details["kurtosis"][i], kurt, rtol=RTOL)
        np.testing.assert_allclose(result.details["skewness"][i], stats.skew(e), rtol=RTOL)
        np.testing.assert_allclose(
            result.details["excess_kurtosis"][i], stats.kurtosis(e), rtol=RTOL
        )


@pytest.mark.parametrize("shift", [0.0, 1e3, -5e4])
def test_location_does_not_matter(shift):
    # Moments are central: adding a constant leaves JB unchanged up to rounding.
    e = np.random.default_rng(1).standard_t(4, 80)
    base = jarque_bera(residuals([e])).statistic[0]
    np.testing.assert_allclose(jarque_bera(residuals([e + shift])).statistic[0], base, rtol=1e-8)


def test_skips_with_reasons():
    rng = np.random.default_rng(2)
    rows = [np.full(30, -1.5), np.zeros(30), rng.normal(0, 1, 7), [np.nan] * 9, rng.normal(0, 1, 8)]
    result = jarque_bera(residuals(rows))
    assert result.skip_reason[0] == "residuals are constant"
    assert result.skip_reason[1] == "residuals are constant"
    assert result.skip_reason[2] == "fewer than 8 residuals"
    assert result.skip_reason[3] == "fewer than 8 residuals"
    assert result.skip_reason[4] is None
    assert jarque_bera(residuals(rows), min_obs=5).skip_reason[2] is None


def test_the_check_tests_with_shapiro_wilk_as_scipy_computes_it():
    # scipy.stats.shapiro (algorithm AS R94, Royston 1995) on each row, ragged, with gaps; its
    # Fortran code carries single-precision constants, hence rtol 1e-7.
    from scipy import stats

    from service.core import make_batch, residuals_of
    from service.core.checks.normality import normality

    rng = np.random.default_rng(31)
    rows = [rng.standard_normal(n) for n in (8, 9, 11, 12, 20, 52, 104, 400)]
    rows += [rng.standard_t(3, 60), rng.lognormal(0.0, 1.0, 80) - 1.6]
    rows[5][[3, 17]] = np.nan  # gaps: the test runs on the observed residuals
    batch = make_batch(rows, [np.zeros(len(r)) for r in rows])
    result = normality(residuals_of(batch))
    for i, row in enumerate(rows):
        ref = stats.shapiro(row[~np.isnan(row)])
        np.testing.assert_allclose(result.statistic[i], ref.statistic, rtol=1e-7)
        np.testing.assert_allclose(result.p_value[i], ref.pvalue, rtol=1e-7)
        assert result.details["method"][i] == "shapiro-wilk"
    jb = jarque_bera(residuals_of(batch))
    np.testing.assert_array_equal(result.details["jarque_bera"], jb.statistic)
