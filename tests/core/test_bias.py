"""Bias (HAC t test of mean zero) and tracking signal, against statsmodels, scipy and published
values."""

from __future__ import annotations

import numpy as np
import pytest
import statsmodels.api as sm
from scipy import stats
from statsmodels.stats.sandwich_covariance import cov_hac_simple
from statsmodels.tsa.stattools import acovf

from service.core import (
    InputError,
    bias,
    hac_variance_of_mean,
    make_batch,
    newey_west_bias,
    newey_west_lags,
    run_checks,
    tracking_signal,
)
from tests.reference_values import (
    MACRO_N,
    NEWEY_WEST_LAGS,
    X20,
    X20_HAC_STD_ERROR,
    X20_HAC_STD_ERROR_RTOL,
    macro_residuals,
)

from .reference_data import invented_rows, observed, residuals

RTOL = 1e-8


def _ones_hac(e: np.ndarray, lags: int):
    """statsmodels' OLS of e on a constant with a Newey-West covariance, no correction."""
    return sm.OLS(e, np.ones(e.size)).fit(
        cov_type="HAC", cov_kwds={"maxlags": lags, "use_correction": False}, use_t=True
    )


def _scale(res):
    return np.ones(res.n_obs.shape)


# --- Newey-West lag rule -------------------------------------------------------------------


def test_newey_west_lag_rule_docstring_values():
    # tests/reference_values.py NEWEY_WEST_LAGS: computed from the Newey-West lag rule
    # floor(4 (T/100)^(2/9)) (statsmodels' sandwich_covariance).
    # Docstring examples: T = 100 gives 4, T = 20 gives 2.
    assert newey_west_lags(100) == NEWEY_WEST_LAGS[100]
    assert newey_west_lags(20) == NEWEY_WEST_LAGS[20]
    # MACRO (T = 202) gets 4 lags, the lag count the R sandwich::NeweyWest values use.
    assert newey_west_lags(MACRO_N) == NEWEY_WEST_LAGS[MACRO_N]


@pytest.mark.parametrize("n", [3, 10, 20, 35, 50, 99, 100, 101, 156, 300, 999])
def test_default_hac_variance_equals_statsmodels_default_lag_rule(n):
    # cov_hac_simple(nlags=None) applies statsmodels' own default lag rule.
    rng = np.random.default_rng(n)
    e = rng.normal(0.3, 1.0, n)
    fit = sm.OLS(e, np.ones(n)).fit()
    ref = cov_hac_simple(fit, nlags=None, use_correction=False)[0, 0]
    res = residuals([e])
    ours = hac_variance_of_mean(res, newey_west_lags(res.n_obs))[0]
    np.testing.assert_allclose(ours, ref, rtol=RTOL)


# --- Published / computed values -----------------------------------------------------------


@pytest.mark.parametrize(
    ("lags", "se"),
    # tests/reference_values.py X20_HAC_STD_ERROR (computed): X20, SE of the mean with Bartlett
    # weights, 0 / 2 / 4 lags.
    X20_HAC_STD_ERROR,
)
def test_x20_hac_standard_error(lags, se):
    result = newey_west_bias(residuals([X20]), np.ones(1), hac_lags=lags)
    # Given to 7 significant digits (X20_HAC_STD_ERROR_RTOL = 5e-7).
    np.testing.assert_allclose(result.details["std_error"][0], se, rtol=X20_HAC_STD_ERROR_RTOL)
    np.testing.assert_allclose(
        result.details["std_error"][0], _ones_hac(X20, lags).bse[0], rtol=RTOL
    )


def test_macro_bias_matches_ols_hac():
    # MACRO residuals have mean zero by construction (OLS with a constant): t ~ 0.
    e = macro_residuals()
    result = newey_west_bias(residuals([e]), np.ones(1), hac_lags=4)
    ref = _ones_hac(e, 4)
    np.testing.assert_allclose(result.details["std_error"][0], ref.bse[0], rtol=RTOL)
    assert abs(result.statistic[0]) < 1e-10


# --- Against statsmodels on many series ----------------------------------------------------


@pytest.mark.parametrize("hac_lags", [None, 0, 1, 3, 6])
def test_bias_matches_statsmodels_ols_hac(hac_lags):
    rng = np.random.default_rng(7)
    lengths = [5, 12, 30, 57, 104, 156]
    rows = [rng.normal(rng.uniform(-0.5, 0.5), 1.0, n) for n in lengths]
    # Leading missing fitted values on two series: they are dropped, not zero.
    rows[2][:1] = np.nan
    rows[4][:3] = np.nan
    res = residuals(rows)
    result = newey_west_bias(res, _scale(res), hac_lags=hac_lags)
    for i, row in enumerate(rows):
        e = observed(row)
        lags = newey_west_lags(e.size) if hac_lags is None else min(hac_lags, e.size - 1)
        ref = _ones_hac(e, int(lags))
        assert result.details["hac_lags"][i] == lags
        np.testing.assert_allclose(result.details["mean_error"][i], ref.params[0], rtol=RTOL)
        np.testing.assert_allclose(result.details["std_error"][i], ref.bse[0], rtol=RTOL)
        np.testing.assert_allclose(result.statistic[i], ref.tvalues[0], rtol=RTOL)
        np.testing.assert_allclose(result.p_value[i], ref.pvalues[0], rtol=RTOL)
        low, high = ref.conf_int(alpha=0.05)[0]
        np.testing.assert_allclose(result.details["ci_low"][i], low, rtol=RTOL)
        np.testing.assert_allclose(result.details["ci_high"][i], high, rtol=RTOL)
        assert result.details["df"][i] == e.size - 1


def test_zero_lags_is_the_one_sample_t_test_with_population_variance():
    # With 0 lags our SE is sqrt(m2 / T) (population variance, no small-sample correction),
    # scipy's is sqrt(s^2 / T) with s^2 = T m2 / (T - 1): t_ours = t_scipy sqrt(T / (T - 1)).
    rng = np.random.default_rng(3)
    rows = invented_rows(rng, [4, 9, 25, 80])
    rows = [r + 0.4 for r in rows]
    res = residuals(rows)
    result = newey_west_bias(res, _scale(res), hac_lags=0)
    for i, e in enumerate(rows):
        n = e.size
        ref = stats.ttest_1samp(e, 0.0)
        np.testing.assert_allclose(
            result.statistic[i], ref.statistic * np.sqrt(n / (n - 1)), rtol=RTOL
        )
        np.testing.assert_allclose(
            result.p_value[i],
            2 * stats.t.sf(abs(ref.statistic) * np.sqrt(n / (n - 1)), n - 1),
            rtol=RTOL,
        )
        # Same degrees of freedom as scipy's test.
        assert result.details["df"][i] == ref.df


def test_hac_with_interior_gaps_uses_observed_pairs():
    # The documented gap rule: autocovariances over observed pairs divided by n_obs, i.e.
    # statsmodels' acovf(missing="conservative", adjusted=False).
    rng = np.random.default_rng(11)
    e = rng.normal(0.2, 1.0, 60)
    e[[7, 8, 30, 44]] = np.nan
    res = residuals([e])
    lags = 3
    gamma = acovf(e, adjusted=False, missing="conservative", nlag=lags, fft=False)
    w = 1 - np.arange(1, lags + 1) / (lags + 1)
    ref = (gamma[0] + 2 * (w * gamma[1:]).sum()) / observed(e).size
    np.testing.assert_allclose(hac_variance_of_mean(res, np.array([lags]))[0], ref, rtol=RTOL)
    result = newey_west_bias(res, np.ones(1), hac_lags=lags)
    np.testing.assert_allclose(result.statistic[0], np.nanmean(e) / np.sqrt(ref), rtol=RTOL)
    assert result.details["df"][0] == 55


def test_ci_level_changes_interval_not_test():
    rng = np.random.default_rng(5)
    e = rng.normal(0.5, 1.0, 40)
    ref = _ones_hac(e, 3)
    r90 = newey_west_bias(residuals([e]), np.ones(1), hac_lags=3, ci_level=0.9)
    low, high = ref.conf_int(alpha=0.10)[0]
    np.testing.assert_allclose(
        [r90.details["ci_low"][0], r90.details["ci_high"][0]], [low, high], rtol=RTOL
    )
    np.testing.assert_allclose(r90.p_value[0], ref.pvalues[0], rtol=RTOL)


def test_percent_bias_and_correction_sign():
    # Invented: a model whose forecasts run 2 units low on a series around 100.
    rng = np.random.default_rng(2)
    actuals = rng.normal(100, 5, (1, 50))
    fitted = actuals - 2.0 + rng.normal(0, 1, (1, 50))
    fitted[0, 0] = np.nan
    batch = make_batch(actuals, fitted)
    b = run_checks(batch, only=("bias",))["bias"]
    e = (actuals - fitted)[0, 1:]
    np.testing.assert_allclose(b.details["mean_error"][0], e.mean(), rtol=RTOL)
    # percent_bias = 100 mean(e) / mean|actual| over the periods with a residual.
    np.testing.assert_allclose(
        b.details["percent_bias"][0], 100 * e.mean() / np.abs(actuals[0, 1:]).mean(), rtol=RTOL
    )
    # e > 0: forecasts run low; adding the correction to them removes the bias.
    assert b.details["correction"][0] > 0
    corrected = make_batch(actuals, fitted + b.details["correction"][0])
    after = run_checks(corrected, only=("bias",))["bias"]
    assert abs(after.details["mean_error"][0]) < 1e-9
    assert after.p_value[0] > 0.999


# --- Edge cases -----------------------------------------------------------------------------


def test_bias_edge_cases_decided():
    rows = [
        np.full(30, 0.1),  # constant, not zero: biased for certain
        np.zeros(30),  # perfect fit: nothing to test
        np.array([1.0, -1.0]),  # too short
        np.array([np.nan] * 10),  # all missing
        np.full(40, 0.1) + np.random.default_rng(0).normal(0, 1e-15, 40),  # constant to rounding
    ]
    res = residuals(rows)
    result = bias(res, _scale(res))
    assert np.isposinf(result.statistic[0]) and result.p_value[0] == 0
    assert result.details["std_error"][0] == 0
    assert result.skip_reason[1] == "residuals are all zero"
    assert result.skip_reason[2] == "fewer than 3 residuals"
    assert result.skip_reason[3] == "fewer than 3 residuals"
    # Rounding noise must not turn into a finite huge t: same decision as exactly constant.
    assert np.isposinf(result.statistic[4]) and result.p_value[4] == 0
    assert list(result.skip_reason[[0, 4]]) == [None, None]


def test_perfect_fit_up_to_rounding_is_all_zero():
    # Invented: fitted values that reproduce the actuals through another floating-point path
    # (0.1 + 0.2 for 0.3): residuals of about 1e-17, zero within rounding, not a certain bias.
    a = np.full((1, 30), 0.3)
    f = np.full((1, 30), 0.1) + np.full((1, 30), 0.2)
    assert (a - f != 0).all()
    result = run_checks(make_batch(a, f), only=("bias",))["bias"]
    assert result.skip_reason[0] == "residuals are all zero"


def test_bias_bad_options_name_the_argument():
    res = residuals([X20])
    with pytest.raises(InputError) as err:
        bias(res, np.ones(1), hac_lags=-1)
    assert err.value.argument == "hac_lags"
    for level in (0.0, 1.0, 1.5):
        with pytest.raises(InputError) as err:
            bias(res, np.ones(1), ci_level=level)
        assert err.value.argument == "ci_level"


# --- Tracking signal ------------------------------------------------------------------------


def test_tracking_signal_formula_and_p_value():
    rng = np.random.default_rng(8)
    rows = invented_rows(rng, [24, 40, 90])
    rows[1] = rows[1] + 0.8
    rows[2][[5, 85]] = np.nan  # a gap inside the window: the window takes the last 12 observed
    res = residuals(rows)
    result = tracking_signal(res, window=12)
    for i, row in enumerate(rows):
        e = observed(row)
        last = e[-12:]
        mad = np.abs(last).mean()
        ts = last.sum() / mad  # the trade's tracking signal (common practice)
        # computed: z = X / max(s0, sw) with X = sum(last) / sqrt(w), s0^2 = mean(e^2) and sw
        # the window's standard deviation (ddof 1); t = z sqrt((n - 1) / (n - z^2)), scipy's t.
        n = e.size
        x = last.sum() / np.sqrt(12)
        z = x / max(np.sqrt(np.mean(e * e)), last.std(ddof=1))
        t = z * np.sqrt((n - 1) / (n - z * z))
        assert not result.details["volatile_window"][i]  # these windows are not volatile
        np.testing.assert_allclose(result.statistic[i], ts, rtol=RTOL)
        np.testing.assert_allclose(result.details["z"][i], z, rtol=RTOL)
        np.testing.assert_allclose(result.details["t"][i], t, rtol=RTOL)
        np.testing.assert_allclose(result.p_value[i], 2 * stats.t.sf(abs(t), n - 1), rtol=RTOL)
        np.testing.assert_allclose(result.details["mean_absolute_error"][i], mad, rtol=RTOL)
        assert result.details["beyond_trade_limit"][i] == (abs(ts) > 4)


def test_a_volatile_window_is_judged_by_its_own_one_sample_t_test():
    # Invented: 80 quiet periods, then 12 with five times the spread and a small mean. The
    # window's variance is far above the whole sample's second moment, so its p-value is the
    # one-sample t test of the window alone (scipy.stats.ttest_1samp, 11 df).
    rng = np.random.default_rng(31)
    row = np.r_[rng.normal(0, 1, 80), rng.normal(1.0, 5.0, 12)]
    result = tracking_signal(residuals([row]), window=12)
    ref = stats.ttest_1samp(row[-12:], 0.0)
    assert result.details["volatile_window"][0] and result.details["df"][0] == 11
    np.testing.assert_allclose(result.details["t"][0], ref.statistic, rtol=RTOL)
    np.testing.assert_allclose(result.p_value[0], ref.pvalue, rtol=1e-9)


def test_tracking_signal_alarms_at_nominal_rate_and_trade_limit_does_not():
    # Invented simulation, seeded: independent N(0, 1) errors, 4000 series of 60 periods.
    rng = np.random.default_rng(2026)
    rows = rng.normal(0, 1, (4000, 60))
    res = residuals(list(rows))
    rates = {}
    for w, low in ((6, 0.025), (12, 0.035), (24, 0.035)):
        r = tracking_signal(res, window=w)
        # Nominal 5%: the test is at most as liberal as an exact one under these errors
        # (binomial SE of the rate about 0.0035); a short window is judged on its own t test
        # (5 df) whenever its variance looks volatile, which makes it the more careful (3.5%).
        assert low < np.mean(r.p_value < 0.05) < 0.07
        rates[w] = np.mean(r.details["beyond_trade_limit"])
    # The fixed limit of 4 alarms more often as the window grows.
    assert rates[24] > 2 * rates[6]


def test_tracking_signal_skips_and_options():
    rows = [
        np.ones(30) * 0.5,
        np.r_[np.random.default_rng(1).normal(0, 1, 20), np.zeros(12)],
        np.random.default_rng(2).normal(0, 1, 20),
    ]
    result = tracking_signal(residuals(rows), window=12)
    assert result.skip_reason[0] == "residuals are constant"
    assert result.skip_reason[1] == "the last 12 residuals are all zero"
    assert result.skip_reason[2] == "fewer than 24 residuals for a window of 12"
    with pytest.raises(InputError) as err:
        tracking_signal(residuals(rows), window=1)
    assert err.value.argument == "window"
    # min_obs may lower the requirement, never below window + 1.
    assert tracking_signal(residuals(rows), window=12, min_obs=5).skip_reason[2] is None
    short = tracking_signal(residuals([np.arange(12.0)]), window=12, min_obs=5)
    assert short.skip_reason[0] == "fewer than 13 residuals for a window of 12"


def test_the_bias_check_tests_with_ewc_and_reports_newey_west_beside_it():
    # The check's statistic is the EWC t test; the Newey-West figures sit in its details.
    from service.core.ewc import ewc_bias, series_bins

    rng = np.random.default_rng(12)
    rows = invented_rows(rng, [80, 52, 104, 20, 60, 33])
    res = residuals(rows)
    scale = _scale(res)
    check = bias(res, scale, hac_lags=3)
    ewc = ewc_bias(res, scale, bins=series_bins(res.n_obs))
    nw = newey_west_bias(res, scale, hac_lags=3)
    # The per-series rule: floor(T / 6) terms, at least LLSW's (T = 80, 52, 104, 20, 60, 33).
    assert check.details["bins"].tolist() == [13, 8, 17, 3, 10, 5]
    np.testing.assert_array_equal(check.statistic, ewc.statistic)
    np.testing.assert_array_equal(check.p_value, ewc.p_value)
    for key in ("mean_error", "std_error", "ci_low", "ci_high", "df"):
        np.testing.assert_array_equal(check.details[key], ewc.details[key])
    np.testing.assert_array_equal(check.details["nw_t"], nw.statistic)
    np.testing.assert_array_equal(check.details["nw_p_value"], nw.p_value)
    np.testing.assert_array_equal(check.details["nw_std_error"], nw.details["std_error"])
    assert (check.details["hac_lags"] == 3).all() and (check.details["method"] == "ewc").all()
    # The residual standard deviation (ddof 1) backs the materiality rule.
    for i, row in enumerate(rows):
        np.testing.assert_allclose(
            check.details["residual_sd"][i], np.std(observed(row), ddof=1), rtol=RTOL
        )
