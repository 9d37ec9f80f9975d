"""Diebold-Mariano test (HLN and EWC variances) and Holm across benchmarks, against scipy,
statsmodels and values computed by hand from the published formulas."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats
from scipy.fft import dct
from statsmodels.stats.multitest import multipletests
from statsmodels.tsa.stattools import acovf

from service.core import InputError, make_batch
from service.core.comparison import (
    compare_with_benchmarks,
    dm_test,
    ewc_terms,
    hln_factor,
    holm,
)
from service.core.holdout import benchmark_forecasts
from tests.reference_values import DM_PACKAGE_ABSOLUTE_H3, DM_PACKAGE_ATOL, DM_PACKAGE_SQUARED

RTOL = 1e-8
MODEL = np.array([[1.0, -2.0, 1.0, 3.0, -1.0, 2.0]])
BENCH = np.array([[2.0, -1.0, 3.0, -2.0, 2.0, 3.0]])


def _direct_hln(e1, e2, h, power):
    """One series, straight from Harvey, Leybourne & Newbold (1997) with statsmodels' acovf."""
    d = np.abs(e1) ** power - np.abs(e2) ** power
    d = d[~np.isnan(d)]
    n = d.size
    g = acovf(d, nlag=h - 1, adjusted=False, fft=False)
    v = g[0] + 2 * g[1:h].sum()
    dm = d.mean() / np.sqrt(v / n)
    stat = dm * np.sqrt((n + 1 - 2 * h + h * (h - 1) / n) / n)
    return stat, stats.t.sf(stat, n - 1), 2 * stats.t.sf(abs(stat), n - 1)


def _direct_ewc(e1, e2, b, power):
    d = np.abs(e1) ** power - np.abs(e2) ** power
    n = d.size
    lam = np.sqrt(2 / n) * dct(d - d.mean(), type=2)[1 : b + 1] / 2
    stat = d.mean() / np.sqrt((lam**2).mean() / n)
    return stat, stats.t.sf(stat, b)


def test_computed_example():
    # computed: d = e_model^2 - e_bench^2 = -3, 3, -8, 5, -3, -5; dbar = -11/6;
    # gamma_0 = mean(d^2) - dbar^2 = 141/6 - 121/36; DM = dbar / sqrt(gamma_0 / 6);
    # DM* = DM sqrt(5/6) (HLN with h = 1); p from scipy's t with 5 df.
    d = np.array([-3.0, 3.0, -8.0, 5.0, -3.0, -5.0])
    dbar = -11 / 6
    gamma0 = 141 / 6 - 121 / 36
    stat = dbar / np.sqrt(gamma0 / 6) * np.sqrt(5 / 6)
    result = dm_test(MODEL, BENCH, variance="acf", h=1)
    np.testing.assert_allclose(MODEL[0] ** 2 - BENCH[0] ** 2, d)
    np.testing.assert_allclose(result.statistic[0], stat, rtol=RTOL)
    np.testing.assert_allclose(result.p_worse[0], stats.t.sf(stat, 5), rtol=RTOL)
    np.testing.assert_allclose(result.p_two_sided[0], 2 * stats.t.sf(abs(stat), 5), rtol=RTOL)
    np.testing.assert_allclose(result.mean_differential[0], dbar, rtol=RTOL)
    # The docstring's rounded values.
    np.testing.assert_allclose(result.statistic[0], -0.913500, atol=5e-7)
    np.testing.assert_allclose(result.p_worse[0], 0.798560, atol=5e-7)
    assert result.h[0] == 1 and not result.fallback[0] and result.n_obs[0] == 6


def test_hln_with_h_one_is_the_one_sample_t_test():
    # HLN's DM* at h = 1 is dbar / (s / sqrt(n)) with s the sample sd: scipy's ttest_1samp.
    rng = np.random.default_rng(1)
    e1, e2 = rng.normal(size=(2, 9, 12))
    result = dm_test(e1, e2, variance="acf", h=1)
    ref = stats.ttest_1samp(e1**2 - e2**2, 0.0, axis=1, alternative="greater")
    np.testing.assert_allclose(result.statistic, ref.statistic, rtol=RTOL)
    np.testing.assert_allclose(result.p_worse, ref.pvalue, rtol=RTOL)


@pytest.mark.parametrize("loss", ["squared", "absolute"])
def test_acf_variance_equals_a_direct_per_series_implementation(loss):
    rng = np.random.default_rng(5)
    e1 = rng.normal(size=(8, 12))
    e2 = rng.normal(size=(8, 12)) * 1.2 + 0.3 * e1
    h = np.array([1, 2, 3, 4, 1, 2, 3, 4])
    power = 2 if loss == "squared" else 1
    result = dm_test(e1, e2, loss=loss, variance="acf", h=h)
    for i in range(8):
        stat, p_worse, p_two = _direct_hln(e1[i], e2[i], int(result.h[i]), power)
        np.testing.assert_allclose(result.statistic[i], stat, rtol=RTOL)
        np.testing.assert_allclose(result.p_worse[i], p_worse, rtol=RTOL)
        np.testing.assert_allclose(result.p_two_sided[i], p_two, rtol=RTOL)
    assert (result.h[~result.fallback] == h[~result.fallback]).all()


@pytest.mark.parametrize("loss", ["squared", "absolute"])
def test_ewc_variance_equals_a_direct_per_series_implementation(loss):
    rng = np.random.default_rng(6)
    e1 = rng.normal(size=(6, 12))
    e2 = rng.normal(size=(6, 12)) + 0.2
    power = 2 if loss == "squared" else 1
    for b in (None, 2, 5):
        result = dm_test(e1, e2, loss=loss, b=b)
        for i in range(6):
            bb = int(ewc_terms(12)) if b is None else b
            stat, p = _direct_ewc(e1[i], e2[i], bb, power)
            np.testing.assert_allclose(result.statistic[i], stat, rtol=RTOL)
            np.testing.assert_allclose(result.p_worse[i], p, rtol=RTOL)
            assert result.b[i] == bb and result.variance == "ewc"


def test_third_party_implementation_values():
    # tests/reference_values.py DM_PACKAGE_*: the dieboldmariano package's tests
    # (tests/dieboldmarianotest.py, 4 decimals): a third-party implementation of the same HLN
    # formula, not a publication.
    ref = DM_PACKAGE_SQUARED
    p1 = np.array(ref["forecast_1"])
    p2 = np.array(ref["forecast_2"])
    result = dm_test(-p1[None, :], -p2[None, :], variance="acf", h=1)
    np.testing.assert_allclose(result.statistic[0], ref["statistic"], atol=DM_PACKAGE_ATOL)
    np.testing.assert_allclose(result.p_two_sided[0], ref["p_two_sided"], atol=DM_PACKAGE_ATOL)
    ref = DM_PACKAGE_ABSOLUTE_H3
    f1 = list(ref["forecast_1"])
    f2 = list(ref["forecast_2"])
    result = dm_test(-np.array([f1]), -np.array([f2]), loss="absolute", variance="acf", h=3)
    np.testing.assert_allclose(result.statistic[0], ref["statistic"], atol=DM_PACKAGE_ATOL)
    # Their one-sided p-value for a positive statistic is P(T <= stat) = 1 - p_worse.
    np.testing.assert_allclose(1 - result.p_worse[0], ref["p_less"], atol=ref["p_less_atol"])


@pytest.mark.parametrize("n", [2, 3, 6, 12, 24, 100])
def test_hln_factor_identities(n):
    # Harvey, Leybourne & Newbold (1997), eq. 9: h = 1 gives sqrt((n - 1) / n).
    np.testing.assert_allclose(hln_factor(n, 1), np.sqrt((n - 1) / n), rtol=RTOL)
    # computed: at h = n - 1 the factor is sqrt(2) / n, and the factor falls as h grows.
    if n > 2:
        np.testing.assert_allclose(hln_factor(n, n - 1), np.sqrt(2) / n, rtol=RTOL)
        values = hln_factor(n, np.arange(1, n))
        assert (np.diff(values) < 0).all()
    np.testing.assert_allclose(hln_factor(12, 2), np.sqrt(55 / 72), rtol=RTOL)  # docstring


def test_non_positive_variance_falls_back_to_h_one():
    # Alternating differentials: gamma_1 < 0 and gamma_0 + 2 gamma_1 < 0 (computed).
    e1 = np.array([[3.0, 0.0, 3.1, 0.0, 2.9, 0.0, 3.0, 0.2]])
    e2 = np.array([[0.0, 3.0, 0.0, 3.0, 0.0, 3.0, 0.0, 3.0]])
    d = e1[0] ** 2 - e2[0] ** 2
    g = acovf(d, nlag=1, adjusted=False, fft=False)
    assert g[0] + 2 * g[1] <= 0
    fell = dm_test(e1, e2, variance="acf", h=2)
    plain = dm_test(e1, e2, variance="acf", h=1)
    assert fell.fallback[0] and fell.h[0] == 1
    np.testing.assert_allclose(fell.statistic, plain.statistic, rtol=RTOL)
    np.testing.assert_allclose(fell.p_worse, plain.p_worse, rtol=RTOL)


def test_h_is_clamped_below_the_sample_size():
    rng = np.random.default_rng(2)
    e1, e2 = rng.normal(size=(2, 1, 5))
    result = dm_test(e1, e2, variance="acf", h=10)
    assert result.h[0] <= 4


def test_constant_differential_uses_the_sign_test():
    # |e| differs by exactly 2 at every step: no sampling variation in d.
    worse = dm_test(
        np.array([[3.0, -3.0, 3.0, 3.0]]), np.array([[1.0, 1.0, -1.0, 1.0]]), loss="absolute"
    )
    assert worse.statistic[0] == np.inf
    assert worse.p_worse[0] == 0.5**4 and worse.p_two_sided[0] == 2 * 0.5**4
    better = dm_test(np.array([[1.0, 1.0, 1.0]]), np.array([[2.0, 2.0, 2.0]]), variance="acf")
    assert better.statistic[0] == -np.inf and better.p_worse[0] == 1.0


def test_skips_with_reasons():
    e1 = np.array([[1.0, 2.0, np.nan, np.nan], [1.0, -2.0, 3.0, 1.0]])
    e2 = np.array([[2.0, 1.0, 1.0, 1.0], [-1.0, 2.0, -3.0, 1.0]])
    result = dm_test(e1, e2)
    assert result.skip_reason[0] == "fewer than 3 holdout steps with both forecasts"
    assert result.skip_reason[1] == "the model and the benchmark have equal losses at every step"
    assert np.isnan(result.statistic).all() and np.isnan(result.p_worse).all()


def test_gaps_use_the_steps_with_both_errors():
    e1 = np.array([[1.0, np.nan, -2.0, 1.5, 3.0, np.nan, -1.0, 2.0]])
    e2 = np.array([[2.0, 1.0, -1.0, np.nan, -2.0, 0.5, 2.0, 3.0]])
    both = ~np.isnan(e1 + e2)
    closed1, closed2 = e1[both][None, :], e2[both][None, :]
    for kw in ({"variance": "acf", "h": 1}, {"b": 2}):
        gap = dm_test(e1, e2, **kw)
        ref = dm_test(closed1, closed2, **kw)
        np.testing.assert_allclose(gap.statistic, ref.statistic, rtol=RTOL)
        assert gap.n_obs[0] == 5


@pytest.mark.parametrize("unit", [1e-200, 1e-6, 1e6, 1e200])
def test_statistic_is_scale_free_without_overflow(unit):
    rng = np.random.default_rng(4)
    e1, e2 = rng.normal(size=(2, 3, 12))
    ref = dm_test(e1, e2, variance="acf", h=2)
    got = dm_test(e1 * unit, e2 * unit, variance="acf", h=2)
    np.testing.assert_allclose(got.statistic, ref.statistic, rtol=1e-10)
    np.testing.assert_allclose(dm_test(e1 * unit, e2 * unit).statistic, dm_test(e1, e2).statistic)


def test_several_benchmarks_at_once_equal_separate_calls():
    rng = np.random.default_rng(9)
    model = rng.normal(size=(5, 12))
    bench = rng.normal(size=(3, 5, 12)) * 1.1
    together = dm_test(model, bench)
    assert together.statistic.shape == (3, 5)
    for k in range(3):
        alone = dm_test(model, bench[k])
        np.testing.assert_array_equal(together.statistic[k], alone.statistic)
        np.testing.assert_array_equal(together.p_worse[k], alone.p_worse)


def test_holm_docstring_and_statsmodels():
    np.testing.assert_allclose(holm(np.array([0.01, 0.04, 0.03])), [0.03, 0.06, 0.06], rtol=RTOL)
    rng = np.random.default_rng(11)
    p = rng.uniform(0, 0.2, size=(4, 30))
    p[rng.random(p.shape) < 0.25] = np.nan
    ours = holm(p, axis=0)
    for j in range(30):
        keep = ~np.isnan(p[:, j])
        assert np.isnan(ours[~keep, j]).all()
        if keep.any():
            ref = multipletests(p[keep, j], method="holm")[1]
            np.testing.assert_allclose(ours[keep, j], ref, rtol=RTOL)


def _batch(seasonal: bool = False):
    rng = np.random.default_rng(21)
    m = 4 if seasonal else 1
    y = 20 + rng.normal(size=(4, 40)).cumsum(axis=1) * 0.3 + rng.normal(size=(4, 40))
    hold = 20 + rng.normal(size=(4, 8))
    fc = hold + rng.normal(size=(4, 8)) * np.array([[0.5], [1.0], [3.0], [0.2]])
    hold[3, 5:] = np.nan
    return make_batch(y, y, season_length=m, holdout_actuals=hold, holdout_forecasts=fc)


@pytest.mark.parametrize("seasonal", [False, True])
def test_compare_with_benchmarks(seasonal):
    batch = _batch(seasonal)
    result = compare_with_benchmarks(batch)
    names = ("mean", "naive", "seasonal_naive", "drift") if seasonal else ("mean", "naive", "drift")
    assert result.benchmarks == names
    forecasts = benchmark_forecasts(batch, 8)
    model = batch.holdout.actuals - batch.holdout.forecasts
    for k, name in enumerate(names):
        alone = dm_test(model, batch.holdout.actuals - forecasts[name])
        np.testing.assert_array_equal(result.tests.p_worse[k], alone.p_worse)
    np.testing.assert_allclose(result.p_holm, holm(result.tests.p_worse, axis=0), rtol=RTOL)
    np.testing.assert_allclose(result.p_worse_any, np.nanmin(result.p_holm, axis=0), rtol=RTOL)
    best = np.nanargmin(result.p_holm, axis=0)
    assert list(result.worst_benchmark) == [names[j] for j in best]
    # Row by row: a series' result does not depend on the other rows.
    one = compare_with_benchmarks(batch.take(np.array([2])))
    np.testing.assert_array_equal(one.p_worse_any, result.p_worse_any[2:3])


def test_compare_without_holdout_and_bad_arguments():
    batch = make_batch([[1.0, 2.0, 3.0]], [[1.0, 2.0, 3.0]])
    result = compare_with_benchmarks(batch)
    assert result.skip_reason[0] == "no holdout" and np.isnan(result.p_worse_any[0])
    with pytest.raises(InputError) as err:
        compare_with_benchmarks(_batch(), benchmarks=["seasonal_naive"])
    assert err.value.argument == "benchmarks"
    with pytest.raises(InputError) as err:
        dm_test(MODEL, BENCH, loss="cubic")
    assert err.value.argument == "loss"
    with pytest.raises(InputError) as err:
        dm_test(MODEL, BENCH, variance="bartlett")
    assert err.value.argument == "variance"
    with pytest.raises(InputError) as err:
        dm_test(MODEL, BENCH, variance="acf", h=0)
    assert err.value.argument == "h"
    with pytest.raises(InputError) as err:
        dm_test(MODEL, BENCH, b=1.5)
    assert err.value.argument == "b"


def test_ewc_terms_rule():
    # Docstring: max(2, floor(0.8 n^(2/3))), capped at n - 1: n = 6, 12, 24 give 2, 4, 6.
    assert ewc_terms(np.array([3, 6, 12, 24])).tolist() == [2, 2, 4, 6]
    assert ewc_terms(2) == 1
