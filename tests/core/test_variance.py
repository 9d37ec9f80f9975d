"""Engle's ARCH LM test against statsmodels' het_arch and published values."""

from __future__ import annotations

import warnings

import numpy as np
import pytest
import statsmodels.api as sm
from scipy import stats
from statsmodels.stats.diagnostic import het_arch
from statsmodels.tsa.tsatools import lagmat

from service.core import InputError, arch_lags, arch_lm
from tests.reference_values import MACRO_ARCH_LM, MACRO_N, macro_residuals

from .reference_data import invented_rows, observed, residuals

RTOL = 1e-8


def _garch_like(rng, n, a=0.5):
    """Invented residuals whose variance follows the last squared residual (ARCH(1))."""
    e = np.zeros(n)
    prev = 0.0
    for t in range(n):
        e[t] = rng.normal() * np.sqrt(0.5 + a * prev**2)
        prev = e[t]
    return e


@pytest.mark.parametrize(
    ("lags", "lm", "p"),
    # tests/reference_values.py MACRO_ARCH_LM: statsmodels test_diagnostic.py
    # (R FinTS::ArchTest), MACRO residuals.
    MACRO_ARCH_LM,
)
def test_macro_published(lags, lm, p):
    result = arch_lm(residuals([macro_residuals()]), lags=lags)
    np.testing.assert_allclose(result.statistic[0], lm, rtol=RTOL)
    np.testing.assert_allclose(result.p_value[0], p, rtol=RTOL)
    assert result.details["lags"][0] == lags and result.details["df"][0] == lags
    assert result.details["n_rows"][0] == MACRO_N - lags


def test_lag_rule_is_het_arch_default():
    # statsmodels' acorr_lm default: min(10, nobs // 5).
    # computed from that rule:
    np.testing.assert_array_equal(
        arch_lags(np.array([4, 5, 20, 49, 50, 51, 156])), [0, 1, 4, 9, 10, 10, 10]
    )
    rng = np.random.default_rng(0)
    for n in (12, 37, 156):
        e = rng.normal(0, 1, n)
        ours = arch_lm(residuals([e]))
        ref = het_arch(e, result_object=True)
        np.testing.assert_allclose(ours.statistic[0], ref.lm, rtol=RTOL)


@pytest.mark.parametrize("lags", [None, 1, 3, 10])
def test_matches_het_arch_on_mixed_batch(lags):
    rng = np.random.default_rng(21 if lags is None else lags)
    lengths = [15, 26, 60, 104, 156, 156, 90]
    rows = [_garch_like(rng, n) for n in lengths]
    rows[6] = rng.normal(0, 1, 90)  # a homoscedastic one
    rows[2][:1] = np.nan  # leading missing fitted values
    rows[4][:5] = np.nan
    result = arch_lm(residuals(rows), lags=lags)
    for i, row in enumerate(rows):
        e = observed(row)
        nlags = min(10, e.size // 5) if lags is None else lags
        assert result.details["lags"][i] == nlags
        if e.size - nlags < nlags + 2:
            # Decided: fewer regression rows than regressors + 1 skips (statsmodels would
            # report a rank-deficient fit with R^2 = 1).
            assert result.skip_reason[i] == "too few complete rows for the regression"
            continue
        ref = het_arch(e, nlags=nlags, result_object=True)
        np.testing.assert_allclose(result.statistic[i], ref.lm, rtol=RTOL)
        np.testing.assert_allclose(result.p_value[i], ref.lmpval, rtol=RTOL)
        assert result.details["n_rows"][i] == e.size - nlags


def test_interior_gaps_drop_incomplete_regression_rows():
    # Gap rule: rows of the regression with any of s_t..s_{t-L} missing are left out (the
    # "conservative" rule); reference: statsmodels OLS on lagmat with missing="drop".
    rng = np.random.default_rng(13)
    e = _garch_like(rng, 120)
    e[[0, 1, 30, 31, 70, 111]] = np.nan
    lags = 4
    result = arch_lm(residuals([e]), lags=lags)
    s = e[2:] ** 2  # leading gaps are dropped first
    x = lagmat(s, lags, trim="both")
    y = s[lags:]
    fit = sm.OLS(y, sm.add_constant(x, has_constant="add"), missing="drop").fit()
    np.testing.assert_allclose(result.statistic[0], fit.nobs * fit.rsquared, rtol=RTOL)
    np.testing.assert_allclose(
        result.p_value[0], stats.chi2.sf(fit.nobs * fit.rsquared, lags), rtol=RTOL
    )
    assert result.details["n_rows"][0] == fit.nobs


def test_degenerate_series_do_not_change_other_series():
    # A constant or all-missing row in the same block gives a singular system; the other
    # series must still be solved as if alone (exactly).
    rng = np.random.default_rng(5)
    good = [_garch_like(rng, 100), rng.normal(0, 1, 100)]
    alone = arch_lm(residuals(good), lags=3)
    mixed = arch_lm(
        residuals([good[0], np.full(100, 3.0), [np.nan] * 100, good[1], np.tile([1.0, -1.0], 50)]),
        lags=3,
    )
    np.testing.assert_array_equal(mixed.statistic[[0, 3]], alone.statistic)
    np.testing.assert_array_equal(mixed.p_value[[0, 3]], alone.p_value)


def test_skips_with_reasons():
    rng = np.random.default_rng(3)
    rows = [
        np.full(50, 0.7),  # constant
        np.tile([0.1, -0.1], 25),  # +-c: squares constant
        np.zeros(50),  # all zero
        rng.normal(0, 1, 4),  # too short for one lag
        [np.nan] * 20,  # all missing
        np.r_[rng.normal(0, 1, 5), [np.nan] * 3, rng.normal(0, 1, 2)],  # too few full rows
    ]
    result = arch_lm(residuals(rows))
    flat = "squared residuals are constant, so their variance cannot change"
    assert list(result.skip_reason[:3]) == [flat, flat, flat]
    assert result.skip_reason[3] == "too short for one lag (the lag rule allows at most T/5)"
    assert result.skip_reason[4] == "fewer than 2 residuals"
    result = arch_lm(residuals(rows), lags=2)
    assert result.skip_reason[5] == "too few complete rows for the regression"
    assert np.isnan(result.statistic).all()


def test_heteroscedastic_series_are_detected():
    # Invented, seeded: ARCH(1) with a = 0.6 over 400 periods is flagged; white noise is not.
    rng = np.random.default_rng(99)
    rows = [_garch_like(rng, 400, 0.6), *invented_rows(rng, [400])]
    result = arch_lm(residuals(rows), lags=4)
    assert result.p_value[0] < 0.001 < result.p_value[1]


def test_bad_lags_name_the_argument():
    with pytest.raises(InputError) as err:
        arch_lm(residuals([np.arange(30.0)]), lags=0)
    assert err.value.argument == "lags"


@pytest.mark.parametrize("lags", [1, 2, 4])
def test_lag_columns_without_variation_explain_nothing(lags):
    # Squares constant except the last: every lag column is constant over the regression rows,
    # so R^2 = 0 (statsmodels' het_arch agrees to rounding: its LM is ~1e-15).
    e = np.r_[np.ones(30), 5.0]
    result = arch_lm(residuals([e]), lags=lags)
    assert result.skip_reason[0] is None
    np.testing.assert_allclose(result.statistic[0], 0.0, atol=1e-10)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # statsmodels warns that the design is rank-deficient
        ref = het_arch(e, nlags=lags, result_object=True).lm
    np.testing.assert_allclose(result.statistic[0], ref, atol=1e-10)


def test_constant_dependent_variable_skips():
    # s_t constant on every regression row (only the first square differs): nothing to explain.
    result = arch_lm(residuals([np.r_[[3.0], np.full(40, 0.7)]]), lags=2)
    assert result.skip_reason[0] == (
        "squared residuals are constant, so their variance cannot change"
    )
