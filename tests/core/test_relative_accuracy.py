"""RMSSE and the fleet's average relative MAE, against direct computations, statsmodels and
the measures' published properties."""

from __future__ import annotations

import numpy as np
import pytest
import statsmodels.api as sm
from scipy import stats

from service.core import InputError, make_batch
from service.core.fleet_pooling import pooled_mean
from service.core.holdout import benchmark_forecasts
from service.core.relative_accuracy import avg_rel_mae, fleet_avg_rel_mae, rmsse, rmsse_scale

RTOL = 1e-8
TRAIN = [18.0, 13.0, 16.0, 11.0, 17.0, 14.0]


# --- RMSSE ------------------------------------------------------------------------------------


def test_rmsse_docstring_values():
    # computed: differences -5, 3, -5, 6, -3 (squares sum to 104); lag 2: -2, -2, 1, 3 (18).
    np.testing.assert_allclose(rmsse_scale(np.array([TRAIN]), 1), [np.sqrt(104 / 5)], rtol=RTOL)
    np.testing.assert_allclose(rmsse_scale(np.array([TRAIN]), 2), [np.sqrt(4.5)], rtol=RTOL)
    batch = make_batch(
        [TRAIN],
        [TRAIN],
        season_length=2,
        holdout_actuals=[[15.0, 19.0]],
        holdout_forecasts=[[14.0, 14.0]],
    )
    # computed: holdout errors 1, 5, mean square 13.
    np.testing.assert_allclose(rmsse(batch).value, [np.sqrt(13 / (104 / 5))], rtol=RTOL)
    np.testing.assert_allclose(rmsse(batch, seasonal=True).value, [np.sqrt(13 / 4.5)], rtol=RTOL)
    assert rmsse(batch).season_length == 1 and rmsse(batch, seasonal=True).season_length == 2


def test_rmsse_direct_computation():
    rng = np.random.default_rng(0)
    y = rng.normal(10, 2, (6, 30))
    y[1, 5] = np.nan
    hold = rng.normal(10, 2, (6, 7))
    fc = hold + rng.normal(0, 1, (6, 7))
    hold[2, 3] = np.nan
    batch = make_batch(y, y, holdout_actuals=hold, holdout_forecasts=fc)
    got = rmsse(batch).value
    for i in range(6):
        d = np.diff(y[i])
        e = hold[i] - fc[i]
        # computed: M5's RMSSE with numpy, pairs and steps with both values observed.
        ref = np.sqrt(np.nanmean(e**2) / np.nanmean(d**2))
        np.testing.assert_allclose(got[i], ref, rtol=RTOL)


@pytest.mark.parametrize("m", [1, 4, 12])
def test_in_sample_naive_forecast_scores_exactly_one(m):
    # Invariant (Makridakis, Spiliotis & Assimakopoulos 2022): scoring the in-sample (seasonal)
    # naive forecast of the training series gives RMSSE 1.
    rng = np.random.default_rng(m)
    y = rng.normal(50, 8, (5, 60)).round(1)
    batch = make_batch(y, y, season_length=m, holdout_actuals=y[:, m:], holdout_forecasts=y[:, :-m])
    np.testing.assert_allclose(rmsse(batch, seasonal=True).value, 1.0, rtol=1e-12)


@pytest.mark.parametrize("unit", [1e-200, 1e-6, 1e6, 1e200])
def test_rmsse_is_scale_invariant(unit):
    rng = np.random.default_rng(2)
    y = rng.normal(10, 2, (3, 20))
    hold = rng.normal(10, 2, (3, 5))
    fc = hold + 1.5
    ref = rmsse(make_batch(y, y, holdout_actuals=hold, holdout_forecasts=fc)).value
    b = make_batch(y * unit, y * unit, holdout_actuals=hold * unit, holdout_forecasts=fc * unit)
    np.testing.assert_allclose(rmsse(b).value, ref, rtol=1e-12)


def test_rmsse_skips():
    batch = make_batch(
        [[5.0, 5.0, 5.0], [1.0, None, None], [1.0, 2.0, 4.0]],
        [[5.0] * 3, [1.0, None, None], [1.0] * 3],
        holdout_actuals=[[5.0], [1.0], [None]],
        holdout_forecasts=[[6.0], [2.0], [3.0]],
    )
    r = rmsse(batch)
    assert (
        r.skip_reason[0]
        == "the in-sample naive forecast is exact (constant series), so the scale is 0"
    )
    assert r.skip_reason[1] == "training series too short for a lag-1 naive forecast"
    assert r.skip_reason[2] == "no holdout"
    assert np.isnan(r.value).all()
    with pytest.raises(InputError) as err:
        rmsse_scale(np.ones((1, 4)), 0)
    assert err.value.argument == "season_length"


# --- pooled mean and AvgRelMAE ------------------------------------------------------------------


def test_pooled_mean_docstring_and_equal_weights_t_test():
    got = pooled_mean(np.array([1.0, 2.0, 3.0, 6.0]), np.ones(4))
    assert got.estimate == 3.0 and got.n_series == 4 and got.df == 3
    np.testing.assert_allclose(got.std_error, np.sqrt(14 / 12), rtol=RTOL)
    # Equal weights: the one-sample t test and interval (scipy.stats.ttest_1samp).
    x = np.random.default_rng(3).normal(0.2, 1.0, 25)
    got = pooled_mean(x, np.full(25, 7.0), level=0.9)
    ref = stats.ttest_1samp(x, 0.0)
    ci = ref.confidence_interval(0.9)
    np.testing.assert_allclose([got.statistic, got.p_value], [ref.statistic, ref.pvalue], rtol=RTOL)
    np.testing.assert_allclose([got.ci_low, got.ci_high], [ci.low, ci.high], rtol=RTOL)


def test_pooled_mean_equals_wls_with_hc1():
    rng = np.random.default_rng(4)
    x = rng.normal(0.1, 1.0, 30)
    w = rng.integers(1, 25, 30).astype(float)
    x[[3, 7]] = np.nan
    w[11] = 0.0
    got = pooled_mean(x, w)
    keep = ~np.isnan(x) & (w > 0)
    fit = sm.WLS(x[keep], np.ones(keep.sum()), weights=w[keep]).fit(cov_type="HC1", use_t=True)
    np.testing.assert_allclose(got.estimate, fit.params[0], rtol=RTOL)
    np.testing.assert_allclose(got.std_error, fit.bse[0], rtol=RTOL)
    np.testing.assert_allclose(got.p_value, fit.pvalues[0], rtol=RTOL)
    np.testing.assert_allclose([got.ci_low, got.ci_high], fit.conf_int()[0], rtol=RTOL)
    assert got.n_series == 27


def test_pooled_mean_with_too_few_series():
    got = pooled_mean(np.array([2.0, np.nan]), np.ones(2))
    assert got.estimate == 2.0 and got.n_series == 1 and np.isnan(got.std_error)
    with pytest.raises(InputError):
        pooled_mean(np.ones(3), np.ones(3), level=1.0)


def _errors(seed: int = 5, n: int = 40, h: int = 8):
    rng = np.random.default_rng(seed)
    e1 = rng.normal(0, 1, (n, h)) * rng.uniform(0.5, 2, (n, 1))
    e2 = rng.normal(0, 1.3, (n, h)) * rng.uniform(0.5, 2, (n, 1))
    e1[rng.random((n, h)) < 0.1] = np.nan
    return e1, e2


def test_avg_rel_mae_direct_computation_and_interval():
    e1, e2 = _errors()
    e1[0] = 0.0  # model MAE 0: left out
    got = avg_rel_mae(e1, e2)
    ok = ~np.isnan(e1 + e2)
    n = ok.sum(axis=1)
    mae1 = np.nanmean(np.where(ok, np.abs(e1), np.nan), axis=1)
    mae2 = np.nanmean(np.where(ok, np.abs(e2), np.nan), axis=1)
    use = mae1 > 0
    r = np.log(mae1[use] / mae2[use])
    # computed: Davydenko & Fildes (2013), exp(sum n_i log r_i / sum n_i).
    np.testing.assert_allclose(got.estimate, np.exp((n[use] * r).sum() / n[use].sum()), rtol=RTOL)
    assert got.n_series == use.sum() and np.isnan(got.log_ratios[0])
    fit = sm.WLS(r, np.ones(r.size), weights=n[use]).fit(cov_type="HC1", use_t=True)
    np.testing.assert_allclose([got.ci_low, got.ci_high], np.exp(fit.conf_int()[0]), rtol=RTOL)
    np.testing.assert_allclose(got.log_ratio.p_value, fit.pvalues[0], rtol=RTOL)


def test_avg_rel_mae_docstring_example():
    # log ratios log 2, log 0.5, 0 with n_i = 1, 1, 2: weighted mean 0, AvgRelMAE 1.
    e1 = np.array([[2.0, np.nan], [1.0, np.nan], [3.0, 3.0]])
    e2 = np.array([[1.0, 9.0], [2.0, 9.0], [3.0, -3.0]])
    got = avg_rel_mae(e1, e2)
    np.testing.assert_allclose(got.log_ratios, np.log([2.0, 0.5, 1.0]), rtol=RTOL)
    assert got.weights.tolist() == [1, 1, 2]
    np.testing.assert_allclose(got.estimate, 1.0, rtol=RTOL)


def test_avg_rel_mae_is_invariant_to_scaling_a_series():
    # Davydenko & Fildes (2013): relative MAEs are scale-free, so rescaling any series leaves
    # AvgRelMAE and its interval unchanged.
    e1, e2 = _errors(6)
    scale = 10.0 ** np.random.default_rng(7).uniform(-150, 150, (e1.shape[0], 1))
    a, b = avg_rel_mae(e1, e2), avg_rel_mae(e1 * scale, e2 * scale)
    np.testing.assert_allclose(
        [b.estimate, b.ci_low, b.ci_high], [a.estimate, a.ci_low, a.ci_high], rtol=1e-10
    )


def test_avg_rel_mae_swapping_model_and_benchmark_inverts_it():
    # Davydenko & Fildes (2013): the geometric mean is symmetric, AvgRelMAE(B, A) = 1 / (A, B).
    e1, e2 = _errors(8)
    e2[np.isnan(e1)] = np.nan
    a, b = avg_rel_mae(e1, e2), avg_rel_mae(e2, e1)
    np.testing.assert_allclose(b.estimate, 1 / a.estimate, rtol=RTOL)
    np.testing.assert_allclose([b.ci_low, b.ci_high], [1 / a.ci_high, 1 / a.ci_low], rtol=RTOL)


def test_fleet_avg_rel_mae_uses_the_benchmark_forecasts():
    rng = np.random.default_rng(9)
    y = 30 + rng.normal(size=(6, 25)).cumsum(axis=1)
    hold = y[:, -1:] + rng.normal(size=(6, 5)).cumsum(axis=1)
    fc = hold + rng.normal(0, 0.5, (6, 5))
    batch = make_batch(y, y, holdout_actuals=hold, holdout_forecasts=fc)
    naive = benchmark_forecasts(batch, 5)["naive"]
    got = fleet_avg_rel_mae(batch)
    ref = avg_rel_mae(hold - fc, hold - naive)
    assert got.estimate == ref.estimate and got.ci_high == ref.ci_high
    assert fleet_avg_rel_mae(batch, benchmark="drift").estimate != got.estimate
    with pytest.raises(InputError) as err:
        fleet_avg_rel_mae(batch, benchmark="seasonal_naive")
    assert err.value.argument == "benchmark"
    none = fleet_avg_rel_mae(make_batch(y, y))
    assert none.n_series == 0 and np.isnan(none.estimate)
