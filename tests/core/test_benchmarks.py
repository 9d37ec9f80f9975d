"""Benchmark forecasts (mean, naive, seasonal naive, drift) and skill over the best of them.

Check values are computed from the methods' definitions (Hyndman & Athanasopoulos, Forecasting:
Principles and Practice, "simple forecasting methods"); statsmodels' OLS gives the drift line's
independent check.
"""

from __future__ import annotations

import numpy as np

from service.core import BENCHMARKS, benchmark_forecasts, benchmark_skill, make_batch
from service.core.checks.benchmarks import skill_over_benchmarks
from service.core.comparison import compare_with_benchmarks

RTOL = 1e-8
Y = [3.0, 5.0, 4.0, 8.0, 6.0, 9.0, 7.0, 11.0]  # invented quarterly-like series


def test_definitions_on_a_small_series():
    batch = make_batch([Y], [Y], season_length=4)
    f = benchmark_forecasts(batch, 6)
    assert tuple(f) == BENCHMARKS
    # computed: mean of the 8 actuals = 53 / 8.
    np.testing.assert_allclose(f["mean"][0], [53 / 8] * 6, rtol=RTOL)
    # computed: naive repeats the last actual.
    np.testing.assert_allclose(f["naive"][0], [11.0] * 6, rtol=RTOL)
    # computed: seasonal naive, y_{T+h-m(k+1)} with k = floor((h-1)/m): 6, 9, 7, 11, 6, 9.
    np.testing.assert_allclose(f["seasonal_naive"][0], [6, 9, 7, 11, 6, 9], rtol=RTOL)
    # computed: drift y_T + h (y_T - y_1) / (T - 1) = 11 + 8h/7.
    np.testing.assert_allclose(f["drift"][0], 11 + 8 * np.arange(1, 7) / 7, rtol=RTOL)


def test_seasonal_naive_left_out_without_season():
    f = benchmark_forecasts(make_batch([Y], [Y]), 3)
    assert tuple(f) == ("mean", "naive", "drift")


def test_ragged_rows_and_missing_values():
    # Row 0 is shorter (padding): every method starts after its own last observed actual.
    # Row 1 misses the value one season back: the same season's earlier value is used.
    a = [[1.0, 2.0, 3.0, 4.0, 5.0], [2.0, 4.0, 6.0, 8.0, 10.0, None, 14.0, 16.0]]
    batch = make_batch(a, a, season_length=3)
    f = benchmark_forecasts(batch, 4)
    np.testing.assert_allclose(f["naive"][0], [5.0] * 4)
    np.testing.assert_allclose(f["drift"][0], [6.0, 7.0, 8.0, 9.0])
    np.testing.assert_allclose(f["seasonal_naive"][0], [3.0, 4.0, 5.0, 3.0])
    # Row 1: T = 8; one season back for h = 1..4 is y6 (missing -> y3 = 6), y7, y8, y6 -> y3.
    np.testing.assert_allclose(f["seasonal_naive"][1], [6.0, 14.0, 16.0, 6.0])
    np.testing.assert_allclose(f["mean"][1], [np.mean([2, 4, 6, 8, 10, 14, 16])] * 4)
    np.testing.assert_allclose(f["drift"][1], 16 + 2 * np.arange(1, 5))


def test_drift_is_the_line_through_first_and_last():
    # The drift forecast lies on the straight line through (1, y_1) and (T, y_T): the OLS fit
    # through exactly those two points (statsmodels) extrapolates the same values.
    import statsmodels.api as sm

    rng = np.random.default_rng(4)
    y = rng.normal(20, 3, 30)
    f = benchmark_forecasts(make_batch([y], [y]), 5)["drift"][0]
    x = sm.add_constant(np.array([1.0, 30.0]))
    line = sm.OLS(np.array([y[0], y[-1]]), x).fit()
    np.testing.assert_allclose(f, line.predict(sm.add_constant(np.arange(31.0, 36.0))), rtol=1e-10)


def test_skill_against_best_benchmark():
    # Invented: a trending series; the drift method is the best benchmark on the holdout.
    y = np.arange(1.0, 21.0)
    holdout = np.arange(21.0, 25.0) + np.array([0.5, -0.5, 0.5, -0.5])
    model = np.arange(21.0, 25.0) + 0.25
    batch = make_batch([y], [y], holdout_actuals=[holdout], holdout_forecasts=[model])
    result = skill_over_benchmarks(batch)
    drift = 20 + np.arange(1, 5)
    rmse = {
        "mean": np.sqrt(np.mean((holdout - 10.5) ** 2)),
        "naive": np.sqrt(np.mean((holdout - 20.0) ** 2)),
        "drift": np.sqrt(np.mean((holdout - drift) ** 2)),
    }
    rmse_model = np.sqrt(np.mean((holdout - model) ** 2))
    assert result.details["best_benchmark"][0] == "drift"
    np.testing.assert_allclose(result.statistic[0], 1 - rmse_model / rmse["drift"], rtol=RTOL)
    np.testing.assert_allclose(result.details["skill"][0], result.statistic[0])
    for name, value in rmse.items():
        np.testing.assert_allclose(result.details[f"rmse_{name}"][0], value, rtol=RTOL)
    np.testing.assert_allclose(result.details["rmse_model"][0], rmse_model, rtol=RTOL)


def test_model_equal_to_best_benchmark_has_zero_skill_and_worse_is_negative():
    rng = np.random.default_rng(7)
    y = rng.normal(100, 5, (1, 40))
    holdout = rng.normal(100, 5, (1, 6))
    naive = np.full((1, 6), y[0, -1])
    same = skill_over_benchmarks(make_batch(y, y, holdout_actuals=holdout, holdout_forecasts=naive))
    # The model is the naive forecast: same RMSE, so its skill is 1 - RMSE(naive) / RMSE(best).
    assert same.details["rmse_model"][0] == same.details["rmse_naive"][0]
    np.testing.assert_allclose(
        same.statistic[0], 1 - same.details["rmse_naive"][0] / same.details["rmse_best"][0]
    )
    assert same.statistic[0] <= 0.0
    worse = skill_over_benchmarks(
        make_batch(y, y, holdout_actuals=holdout, holdout_forecasts=holdout + 50.0)
    )
    assert worse.statistic[0] < -1.0


def test_skips_with_reasons():
    batch = make_batch(
        [[1.0, 2.0, 3.0], [4.0, 4.0, 4.0], [1.0, 2.0, 3.0]],
        [[1.0, 2.0, 3.0], [4.0, 4.0, 4.0], [1.0, 2.0, 3.0]],
        holdout_actuals=[[None, None], [4.0, 4.0], [5.0, 5.5]],
        holdout_forecasts=[[1.0, 1.0], [4.5, 4.5], [5.0, 5.0]],
    )
    result = skill_over_benchmarks(batch)
    assert result.skip_reason[0] == "no holdout"
    assert result.skip_reason[1] == (
        "a benchmark forecasts the holdout exactly, so skill is undefined"
    )
    assert result.skip_reason[2] is None
    assert result.details["best_benchmark"][0] is None
    assert (
        skill_over_benchmarks(make_batch([[1.0, 2.0]], [[1.0, 2.0]])).skip_reason[0] == "no holdout"
    )


def test_seasonal_naive_reaches_back_to_the_first_season_whatever_the_batch():
    # computed: m = 3, T = 11; for h = 2 the value one season back (index 9) and the same
    # season's earlier values (6, 3) are missing, so the forecast is y at index 0 = 5.
    y = [5.0, 1.0, 2.0, None, 4.0, 5.0, None, 7.0, 8.0, None, 10.0]
    alone = benchmark_forecasts(make_batch([y], [y], season_length=3), 3)["seasonal_naive"]
    np.testing.assert_array_equal(alone[0], [8.0, 5.0, 10.0])
    other = list(np.arange(20.0))
    wide = make_batch([y, other], [y, other], season_length=3)
    np.testing.assert_array_equal(benchmark_forecasts(wide, 3)["seasonal_naive"][0], alone[0])


def test_the_check_tests_by_diebold_mariano_with_holm_across_benchmarks():
    # The check's p-value is the smallest Holm-adjusted one-sided DM p-value over the
    # benchmarks (service.core.comparison), its statistic that comparison's DM statistic,
    # and relative_error the model's RMSE over that benchmark's on the same steps.
    rng = np.random.default_rng(21)
    y = 100 + rng.normal(0, 1, (6, 60))
    holdout = 100 + rng.normal(0, 1, (6, 12))
    forecasts = np.full((6, 12), 100.0)
    forecasts[:3] += np.linspace(0, 3, 12)  # three series drift away: worse than the mean
    batch = make_batch(
        y, y - rng.normal(0, 1, (6, 60)), holdout_actuals=holdout, holdout_forecasts=forecasts
    )
    result = benchmark_skill(batch)
    cmp = compare_with_benchmarks(batch)
    np.testing.assert_array_equal(result.p_value, cmp.p_worse_any)
    best = np.argmin(cmp.p_holm, axis=0)
    for i in range(6):
        name = cmp.benchmarks[best[i]]
        assert result.details["compared_with"][i] == name
        np.testing.assert_array_equal(result.statistic[i], cmp.tests.statistic[best[i], i])
        bench = benchmark_forecasts(batch, 12)[name][i]
        rel = np.sqrt(np.mean((holdout[i] - forecasts[i]) ** 2)) / np.sqrt(
            np.mean((holdout[i] - bench) ** 2)
        )
        np.testing.assert_allclose(result.details["relative_error"][i], rel, rtol=RTOL)
    # The descriptive skill figures ride along.
    skill = skill_over_benchmarks(batch)
    np.testing.assert_array_equal(result.details["skill"], skill.details["skill"])
