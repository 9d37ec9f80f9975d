"""Ljung-Box / Box-Pierce and the sample ACF, against statsmodels and published values."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats
from statsmodels.stats.diagnostic import acorr_ljungbox
from statsmodels.tsa.stattools import acf

from service.core import (
    InputError,
    autocorrelations,
    ljung_box,
    portmanteau_lags,
    portmanteau_q,
)
from tests.reference_values import (
    CHI2_TABLE_ATOL,
    CHI2_UPPER_CRITICAL,
    MACRO_FIRST_30_LAGS,
    MACRO_FIRST_30_LJUNG_BOX,
    MACRO_FIRST_30_LJUNG_BOX_P,
    MACRO_PORTMANTEAU,
    NIST_SERIES_F_ACF,
    NIST_SERIES_F_N,
    NIST_SERIES_F_Q1,
    NIST_SERIES_F_Q1_RTOL,
    macro_residuals,
)

from .reference_data import invented_rows, observed, residuals

RTOL = 1e-8


def _ar1(rng, n, phi):
    e = rng.normal(0, 1, n)
    for t in range(1, n):
        e[t] += phi * e[t - 1]
    return e


# --- Published values -----------------------------------------------------------------------


@pytest.mark.parametrize(
    ("lags", "lb", "lb_p", "bp", "bp_p"),
    # tests/reference_values.py MACRO_PORTMANTEAU: statsmodels test_diagnostic.py (R values),
    # MACRO residuals, 4 and 40 lags (the Box-Pierce p-value at 40 lags is not published there).
    MACRO_PORTMANTEAU,
)
def test_macro_published(lags, lb, lb_p, bp, bp_p):
    result = ljung_box(residuals([macro_residuals()]), lags=lags)
    np.testing.assert_allclose(result.statistic[0], lb, rtol=RTOL)
    np.testing.assert_allclose(result.p_value[0], lb_p, rtol=RTOL)
    np.testing.assert_allclose(result.details["box_pierce"][0], bp, rtol=RTOL)
    if bp_p is not None:
        np.testing.assert_allclose(result.details["box_pierce_p_value"][0], bp_p, rtol=RTOL)
    assert result.details["lags"][0] == lags and result.details["df"][0] == lags


def test_macro_first_30_published():
    # tests/reference_values.py MACRO_FIRST_30_*: statsmodels test_diagnostic.py (R values),
    # res[:30], 13 lags.
    result = ljung_box(residuals([macro_residuals()[:30]]), lags=MACRO_FIRST_30_LAGS)
    np.testing.assert_allclose(result.statistic[0], MACRO_FIRST_30_LJUNG_BOX, rtol=RTOL)
    np.testing.assert_allclose(result.p_value[0], MACRO_FIRST_30_LJUNG_BOX_P, rtol=RTOL)


def test_nist_series_f_q_from_published_acf():
    # tests/reference_values.py NIST_SERIES_F_*: NIST/SEMATECH e-Handbook 6.4.4.9, Series F
    # (n = 70) sample ACF r1 = -0.389878319, r2 = 0.304394082 as published; Q(1) = 11.103
    # computed from r1, given to 5 significant digits (NIST_SERIES_F_Q1_RTOL = 5e-5).
    n = NIST_SERIES_F_N
    r1, r2 = NIST_SERIES_F_ACF
    r = np.array([[r1, r2]])
    q1, bp1 = portmanteau_q(r, np.array([n]), np.array([1]))
    np.testing.assert_allclose(q1[0], NIST_SERIES_F_Q1, rtol=NIST_SERIES_F_Q1_RTOL)
    # Box-Pierce from the same r1 (computed): 70 r1^2.
    np.testing.assert_allclose(bp1[0], n * r1**2, rtol=RTOL)
    # Q(2) (computed from the published r1, r2 with the Ljung-Box formula):
    q2, _ = portmanteau_q(r, np.array([n]), np.array([2]))
    np.testing.assert_allclose(q2[0], n * (n + 2) * (r1**2 / (n - 1) + r2**2 / (n - 2)), rtol=RTOL)


@pytest.mark.parametrize(
    ("df", "crit05", "crit01"),
    # tests/reference_values.py CHI2_UPPER_CRITICAL: NIST e-Handbook table 1.3.6.7.4,
    # chi-square upper critical values.
    CHI2_UPPER_CRITICAL,
)
def test_p_value_uses_chi_square_with_lags_minus_model_params(df, crit05, crit01):
    # Many invented series tested with df = lags - model_params: p < alpha exactly when Q is
    # above the published critical value for that df (table values to 4 decimals).
    rng = np.random.default_rng(df)
    model_params = 2
    lags = df + model_params
    rows = [_ar1(rng, 200, phi) for phi in np.linspace(-0.3, 0.3, 60)]
    result = ljung_box(residuals(rows), lags=lags, model_params=model_params)
    q, p = result.statistic, result.p_value
    assert (result.details["df"] == df).all()
    for alpha, crit in ((0.05, crit05), (0.01, crit01)):
        clear = np.abs(q - crit) > 1e-3
        assert clear.sum() > 50
        np.testing.assert_array_equal((p < alpha)[clear], (q > crit)[clear])
        np.testing.assert_allclose(stats.chi2.sf(crit, df), alpha, atol=CHI2_TABLE_ATOL)
    # Both sides of the critical value occur, so the comparison above is not vacuous.
    assert (q > crit05).any() and (q < crit05).any()


# --- Lag rule -------------------------------------------------------------------------------


def test_lag_rule_docstring_values():
    # Common practice (rule of thumb, no single source): 10 non-seasonal, 2m seasonal, <= T/5.
    assert portmanteau_lags(np.array([104]), 1)[0] == 10
    assert portmanteau_lags(np.array([156]), 52)[0] == 31
    assert portmanteau_lags(np.array([40]), 1)[0] == 8
    assert portmanteau_lags(np.array([400]), 12)[0] == 24
    assert portmanteau_lags(np.array([4]), 1)[0] == 0


def test_default_lags_and_df_reported():
    rng = np.random.default_rng(1)
    res = residuals(invented_rows(rng, [30, 60, 156]), season_length=4)
    result = ljung_box(res, season_length=4, model_params=3)
    # computed from the rule: min(2m = 8, T // 5) = 6, 8, 8 lags; df = lags - 3.
    np.testing.assert_array_equal(result.details["lags"], [6, 8, 8])
    np.testing.assert_array_equal(result.details["df"], [3, 5, 5])


# --- Against statsmodels ---------------------------------------------------------------------


@pytest.mark.parametrize("model_params", [0, 1, 3])
def test_matches_acorr_ljungbox_on_mixed_batch(model_params):
    rng = np.random.default_rng(40 + model_params)
    lengths = [8, 21, 50, 77, 104, 156]
    rows = [_ar1(rng, n, 0.4) for n in lengths]
    rows[1][:1] = np.nan  # leading missing fitted values (naive method)
    rows[5][:2] = np.nan
    res = residuals(rows)
    result = ljung_box(res, model_params=model_params)
    for i, row in enumerate(rows):
        e = observed(row)
        lags = min(10, e.size // 5)
        assert result.details["lags"][i] == lags
        if lags - model_params <= 0:
            assert result.skip_reason[i].startswith("no degrees of freedom left")
            continue
        ref = acorr_ljungbox(e, lags=[lags], model_df=model_params, boxpierce=True)
        np.testing.assert_allclose(result.statistic[i], ref["lb_stat"].iloc[0], rtol=RTOL)
        np.testing.assert_allclose(result.p_value[i], ref["lb_pvalue"].iloc[0], rtol=RTOL)
        np.testing.assert_allclose(
            result.details["box_pierce"][i], ref["bp_stat"].iloc[0], rtol=RTOL
        )
        np.testing.assert_allclose(
            result.details["box_pierce_p_value"][i], ref["bp_pvalue"].iloc[0], rtol=RTOL
        )
        np.testing.assert_allclose(
            result.details["acf_lag1"][i], acf(e, nlags=1, fft=False)[1], rtol=RTOL
        )


def test_acf_and_q_with_interior_gaps():
    # Gap rule: statsmodels' acf(missing="conservative") (observed pairs, divided by n_obs);
    # Q from those r's with T = n_obs.
    rng = np.random.default_rng(9)
    rows = [_ar1(rng, 80, 0.5), _ar1(rng, 120, -0.2)]
    rows[0][[10, 11, 12, 40]] = np.nan
    rows[1][:3] = np.nan
    rows[1][[50, 99]] = np.nan
    res = residuals(rows)
    r = autocorrelations(res, 12)
    result = ljung_box(res, lags=12)
    for i, row in enumerate(rows):
        e = row[~np.isnan(row).cumprod().astype(bool)]  # drop leading gaps only
        ref_r = acf(e, nlags=12, missing="conservative", fft=False)[1:]
        np.testing.assert_allclose(r[i], ref_r, rtol=RTOL)
        t = observed(row).size
        k = np.arange(1, 13)
        q = t * (t + 2) * np.sum(ref_r**2 / (t - k))
        np.testing.assert_allclose(result.statistic[i], q, rtol=RTOL)
        np.testing.assert_allclose(result.p_value[i], stats.chi2.sf(q, 12), rtol=RTOL)


def test_acf_matches_statsmodels_without_gaps():
    rng = np.random.default_rng(4)
    rows = invented_rows(rng, [30, 64])
    r = autocorrelations(residuals(rows), 10)
    for i, e in enumerate(rows):
        np.testing.assert_allclose(r[i], acf(e, nlags=10, fft=False)[1:], rtol=RTOL)


# --- Skips and bad options --------------------------------------------------------------------


def test_skips_with_reasons():
    rng = np.random.default_rng(6)
    rows = [
        np.full(40, 2.0),
        np.zeros(40),
        rng.normal(0, 1, 4),
        [np.nan] * 10,
        rng.normal(0, 1, 1),
        rng.normal(0, 1, 20),
    ]
    result = ljung_box(residuals(rows), model_params=4)
    assert result.skip_reason[0] == "residuals are constant, so autocorrelation is undefined"
    assert result.skip_reason[1] == "residuals are constant, so autocorrelation is undefined"
    assert result.skip_reason[2] == "too short for one lag (the lag rule allows at most T/5)"
    assert result.skip_reason[3] == "fewer than 2 residuals"
    assert result.skip_reason[4] == "fewer than 2 residuals"
    # 20 residuals: 4 lags, 4 model parameters: df 0.
    assert result.details["df"][5] == 0
    assert result.skip_reason[5].startswith("no degrees of freedom left")
    assert np.isnan(result.statistic).all() and np.isnan(result.p_value).all()


def test_explicit_lags_capped_at_t_minus_1():
    e = np.random.default_rng(0).normal(0, 1, 12)
    result = ljung_box(residuals([e]), lags=30)
    assert result.details["lags"][0] == 11
    ref = acorr_ljungbox(e, lags=[11])
    np.testing.assert_allclose(result.statistic[0], ref["lb_stat"].iloc[0], rtol=RTOL)


def test_bad_options_name_the_argument():
    res = residuals([np.arange(30.0)])
    with pytest.raises(InputError) as err:
        ljung_box(res, lags=0)
    assert err.value.argument == "lags"
    with pytest.raises(InputError) as err:
        ljung_box(res, model_params=-1)
    assert err.value.argument == "model_params"
