"""Holdout bias per series (EWC and Newey-West variances) and pooled over the fleet, against
statsmodels, scipy and values computed by hand."""

from __future__ import annotations

import numpy as np
import pytest
import statsmodels.api as sm
from scipy import stats
from scipy.fft import dct

from service.core import InputError, make_batch
from service.core.fleet_pooling import pooled_mean
from service.core.holdout_bias import fleet_holdout_bias, holdout_bias, path_bias, training_rms
from service.core.path_variance import ewc_degrees

RTOL = 1e-8
ERRORS = np.array([[1.0, -1.0, 2.0, 0.0, 3.0, 1.0]])


def test_computed_newey_west_example():
    # computed: centred errors 0, -2, 1, -1, 2, 0; gamma_0 = 10/6, gamma_1 = -5/6;
    # SE^2 = (gamma_0 + 2 (1/2) gamma_1) / 6 = 5/36; t = 6 / sqrt(5); p from t with 5 df.
    got = path_bias(ERRORS, method="newey_west", lags=1)
    np.testing.assert_allclose(got.std_error, [np.sqrt(5 / 36)], rtol=RTOL)
    np.testing.assert_allclose(got.statistic, [6 / np.sqrt(5)], rtol=RTOL)
    np.testing.assert_allclose(got.p_value, [2 * stats.t.sf(6 / np.sqrt(5), 5)], rtol=RTOL)
    np.testing.assert_allclose(got.statistic, [2.683282], atol=5e-7)  # docstring
    np.testing.assert_allclose(got.p_value, [0.043648], atol=5e-7)  # docstring
    assert got.mean_error[0] == 1.0 and got.df[0] == 5 and got.method == "newey_west"


@pytest.mark.parametrize("lags", [0, 1, 2])
def test_newey_west_equals_statsmodels_ols_hac(lags):
    rng = np.random.default_rng(lags)
    e = rng.normal(0.2, 1.0, (5, 12))
    got = path_bias(e, method="newey_west", lags=lags)
    for i in range(5):
        fit = sm.OLS(e[i], np.ones(12)).fit(
            cov_type="HAC", cov_kwds={"maxlags": lags, "use_correction": False}, use_t=True
        )
        np.testing.assert_allclose(got.std_error[i], fit.bse[0], rtol=RTOL)
        np.testing.assert_allclose(got.p_value[i], fit.pvalues[0], rtol=RTOL)


@pytest.mark.parametrize("b", [None, 1, 3])
def test_ewc_equals_a_direct_implementation(b):
    rng = np.random.default_rng(7)
    e = rng.normal(0.3, 1.0, (6, 12))
    got = path_bias(e, b=b)
    bb = int(ewc_degrees(12)) if b is None else b
    for i in range(6):
        lam = np.sqrt(2 / 12) * dct(e[i] - e[i].mean(), type=2)[1 : bb + 1] / 2
        # computed: Lazarus, Lu, Stock & Stock (2018), t = ebar / sqrt(Omega / n) with t_B.
        t = e[i].mean() / np.sqrt((lam**2).mean() / 12)
        np.testing.assert_allclose(got.statistic[i], t, rtol=RTOL)
        np.testing.assert_allclose(got.p_value[i], 2 * stats.t.sf(abs(t), bb), rtol=RTOL)
        assert got.df[i] == bb and got.method == "ewc"


def test_batch_wrapper_percent_bias_and_gaps():
    hold = np.array([[10.0, 12.0, np.nan, 11.0, 13.0], [20.0, 18.0, 22.0, 21.0, 19.0]])
    fc = np.array([[9.0, 11.5, 10.0, 10.0, 12.0], [20.0, 18.0, 22.0, 21.0, 19.0]])
    batch = make_batch(np.ones((2, 5)), np.ones((2, 5)), holdout_actuals=hold, holdout_forecasts=fc)
    got = holdout_bias(batch, method="newey_west", lags=0)
    # computed: errors 1, 0.5, 1, 1 over the 4 scored steps; mean |actual| 11.5.
    np.testing.assert_allclose(got.mean_error[0], 3.5 / 4, rtol=RTOL)
    np.testing.assert_allclose(got.percent_bias[0], 100 * (3.5 / 4) / 11.5, rtol=RTOL)
    assert got.n_obs.tolist() == [4, 5]
    assert got.skip_reason[1] == "holdout errors are all zero"
    # L = 0 over the scored steps: statsmodels' OLS on a constant, HAC with 0 lags.
    fit = sm.OLS(np.array([1.0, 0.5, 1.0, 1.0]), np.ones(4)).fit(
        cov_type="HAC", cov_kwds={"maxlags": 0, "use_correction": False}, use_t=True
    )
    np.testing.assert_allclose(got.p_value[0], fit.pvalues[0], rtol=RTOL)


def test_constant_errors_short_paths_and_bad_arguments():
    got = path_bias(np.array([[2.0, 2.0, 2.0], [1.0, np.nan, np.nan]]))
    assert got.statistic[0] == np.inf and got.p_value[0] == 0.0
    assert got.skip_reason[1] == "fewer than 3 holdout steps"
    with pytest.raises(InputError) as err:
        path_bias(ERRORS, method="intervals")
    assert err.value.argument == "method"
    with pytest.raises(InputError):
        path_bias(ERRORS, method="newey_west", lags=-1)
    with pytest.raises(InputError):
        path_bias(ERRORS, b=0)


@pytest.mark.parametrize("unit", [1e-200, 1e200])
def test_scale_free_without_overflow(unit):
    rng = np.random.default_rng(3)
    e = rng.normal(0.5, 1.0, (3, 10))
    for method in ("ewc", "newey_west"):
        ref = path_bias(e, method=method)
        got = path_bias(e * unit, method=method)
        np.testing.assert_allclose(got.statistic, ref.statistic, rtol=1e-10)
        np.testing.assert_allclose(got.std_error, ref.std_error * unit, rtol=1e-10)


def test_fleet_holdout_bias_direct_computation():
    rng = np.random.default_rng(11)
    y = 10 + rng.normal(size=(30, 20))
    fitted = y - rng.normal(0, rng.uniform(0.5, 2, (30, 1)), (30, 20))
    hold = 10 + rng.normal(size=(30, 6))
    fc = hold - rng.normal(0.1, 1.0, (30, 6))
    hold[4, 2:] = np.nan
    hold[5] = np.nan  # no holdout: left out
    batch = make_batch(y, fitted, holdout_actuals=hold, holdout_forecasts=fc)
    got = fleet_holdout_bias(batch)
    s = np.sqrt(np.mean((y - fitted) ** 2, axis=1))
    np.testing.assert_allclose(training_rms(batch), s, rtol=RTOL)
    e = hold - fc
    n = (~np.isnan(e)).sum(axis=1)
    ebar = np.where(n > 0, np.nansum(e, axis=1) / np.maximum(n, 1), np.nan)
    u = ebar / s
    keep = n > 0
    # computed: weighted mean of ebar_i / s_i with weights n_i; statsmodels WLS with HC1.
    fit = sm.WLS(u[keep], np.ones(keep.sum()), weights=n[keep]).fit(cov_type="HC1", use_t=True)
    np.testing.assert_allclose(got.pooled.estimate, fit.params[0], rtol=RTOL)
    np.testing.assert_allclose(got.pooled.std_error, fit.bse[0], rtol=RTOL)
    np.testing.assert_allclose(got.pooled.p_value, fit.pvalues[0], rtol=RTOL)
    assert got.pooled.n_series == 29 and np.isnan(got.standardised[5])
    # Given weights and scales replace the defaults.
    w = rng.uniform(1, 5, 30)
    other = fleet_holdout_bias(batch, scale=np.ones(30), weights=w)
    ref = pooled_mean(ebar, np.where(keep, w, 0.0))
    np.testing.assert_allclose(other.pooled.estimate, ref.estimate, rtol=RTOL)
    np.testing.assert_allclose(other.pooled.std_error, ref.std_error, rtol=RTOL)
