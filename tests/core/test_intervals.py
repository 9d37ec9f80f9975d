"""Interval coverage (Kupiec POF test) and the Winkler interval score."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from service.core import InputError, interval_coverage, kupiec_lr, make_batch, winkler_scores
from tests.reference_values import (
    KUPIEC_EXERCISE_P_VALUE,
    KUPIEC_EXERCISE_P_VALUE_ATOL,
    KUPIEC_LR,
    KUPIEC_P,
    WINKLER_SCORES,
)

RTOL = 1e-8


def _coverage_batch(misses: int, steps: int, level: float):
    """One invented series whose holdout interval [-1, 1] misses the actual ``misses`` times
    out of ``steps`` (alternately below and above)."""
    y = np.zeros(steps)
    y[:misses] = np.where(np.arange(misses) % 2 == 0, -2.0, 2.0)
    return make_batch(
        [[1.0, 2.0, 3.0]],
        [[1.0, 2.0, 3.0]],
        holdout_actuals=[y],
        holdout_forecasts=[np.zeros(steps)],
        holdout_lower=[np.full(steps, -1.0)],
        holdout_upper=[np.full(steps, 1.0)],
        level=level,
    )


@pytest.mark.parametrize(
    ("x", "t", "lr", "tol"),
    # tests/reference_values.py KUPIEC_LR: Kupiec (1995) LR at p = 0.01; two published values
    # (an exercise answer and one more, 5 decimals) and two computed from the formula, each
    # with the tolerance its printed decimals allow.
    KUPIEC_LR,
)
def test_kupiec_values(x, t, lr, tol):
    np.testing.assert_allclose(
        kupiec_lr(np.array([x]), np.array([t]), np.array([KUPIEC_P])), [lr], atol=tol
    )
    result = interval_coverage(_coverage_batch(x, t, 1 - KUPIEC_P))
    np.testing.assert_allclose(result.statistic[0], lr, atol=tol)
    assert result.details["misses"][0] == x and result.details["n_scored"][0] == t
    np.testing.assert_allclose(result.details["coverage"][0], 1 - x / t, rtol=RTOL)
    np.testing.assert_allclose(result.p_value[0], stats.chi2.sf(result.statistic[0], 1), rtol=RTOL)


def test_kupiec_published_p_value_not_rejected():
    # tests/reference_values.py KUPIEC_EXERCISE_P_VALUE: the published exercise, x = 6,
    # T = 252, p = 0.01: p 0.0614 (4 decimals), not rejected at 5%.
    result = interval_coverage(_coverage_batch(6, 252, 1 - KUPIEC_P))
    np.testing.assert_allclose(
        result.p_value[0], KUPIEC_EXERCISE_P_VALUE, atol=KUPIEC_EXERCISE_P_VALUE_ATOL
    )
    assert result.p_value[0] > 0.05


def test_kupiec_is_the_binomial_likelihood_ratio():
    # LR = 2 [log L(x/T) - log L(p)] for a binomial likelihood (scipy.stats.binom).
    rng = np.random.default_rng(0)
    t = rng.integers(1, 400, 200)
    p = rng.uniform(0.01, 0.5, 200)
    x = rng.binomial(t, p * rng.uniform(0.3, 2.0, 200).clip(0, 1 / p))
    ref = 2 * (stats.binom.logpmf(x, t, x / t) - stats.binom.logpmf(x, t, p))
    np.testing.assert_allclose(kupiec_lr(x, t, p), ref, rtol=1e-8, atol=1e-9)


@pytest.mark.parametrize(
    ("y", "lo", "hi", "alpha", "score"),
    # tests/reference_values.py WINKLER_SCORES: Winkler (1972) interval score, one published
    # example and three computed from the formula.
    WINKLER_SCORES,
)
def test_winkler_values(y, lo, hi, alpha, score):
    got = winkler_scores(np.array([[y]]), np.array([[lo]]), np.array([[hi]]), alpha)
    np.testing.assert_allclose(got, [[score]], rtol=RTOL)


def test_coverage_details_and_mean_winkler_score():
    # Invented holdout of 5 steps at level 0.8 (alpha 0.2), interval [10, 20] each step.
    y = [15.0, 25.0, 8.0, 12.0, None]
    batch = make_batch(
        [[1.0, 2.0]],
        [[1.0, 2.0]],
        holdout_actuals=[y],
        holdout_forecasts=[[15.0] * 5],
        holdout_lower=[[10.0] * 5],
        holdout_upper=[[20.0] * 5],
        level=0.8,
    )
    result = interval_coverage(batch)
    d = result.series_details(0)
    assert d["n_scored"] == 4 and d["misses"] == 2
    assert d["misses_below"] == 1 and d["misses_above"] == 1
    assert d["coverage"] == 0.5 and d["level"] == 0.8
    # computed: scores 10, 60, 30, 10 (the tests/reference_values.py WINKLER_SCORES values for
    # [10, 20] at alpha 0.2), mean 27.5.
    np.testing.assert_allclose(d["winkler_score"], 27.5, rtol=RTOL)
    np.testing.assert_allclose(
        result.statistic[0], kupiec_lr(np.array([2]), np.array([4]), np.array([0.2]))[0], rtol=RTOL
    )


def test_default_level_and_skips():
    batch = make_batch(
        [[1.0, 2.0], [1.0, 2.0]],
        [[1.0, 2.0], [1.0, 2.0]],
        holdout_actuals=[[1.0, 2.0], [1.0, 2.0]],
        holdout_forecasts=[[1.0, 2.0], [1.0, 2.0]],
        holdout_lower=[[0.0, 0.0], [None, None]],
        holdout_upper=[[3.0, 3.0], [None, None]],
    )
    result = interval_coverage(batch)
    assert result.details["level"][0] == 0.95
    assert result.skip_reason[0] is None
    assert result.skip_reason[1] == "no holdout intervals"
    assert np.isnan(result.details["level"][1])
    no_bounds = make_batch(
        [[1.0, 2.0]], [[1.0, 2.0]], holdout_actuals=[[1.0]], holdout_forecasts=[[1.0]]
    )
    assert interval_coverage(no_bounds).skip_reason[0] == "no holdout intervals"
    assert interval_coverage(batch, min_obs=3).skip_reason[0] == (
        "fewer than 3 holdout steps with intervals"
    )


@pytest.mark.parametrize("level", [0.0, 1.0, -0.5, 95.0, float("nan")])
def test_level_outside_unit_interval_is_rejected(level):
    with pytest.raises(InputError) as err:
        make_batch(
            [[1.0]],
            [[1.0]],
            holdout_actuals=[[1.0]],
            holdout_forecasts=[[1.0]],
            holdout_lower=[[0.0]],
            holdout_upper=[[2.0]],
            level=level,
        )
    assert err.value.argument == "level"


def test_level_per_series_with_one_bad_names_the_series():
    with pytest.raises(InputError) as err:
        make_batch(
            [[1.0], [2.0]],
            [[1.0], [2.0]],
            holdout_actuals=[[1.0], [1.0]],
            holdout_forecasts=[[1.0], [1.0]],
            holdout_lower=[[0.0], [0.0]],
            holdout_upper=[[2.0], [2.0]],
            level=[0.9, 1.2],
        )
    assert err.value.argument == "level" and err.value.index == 1


def test_lower_above_upper_is_rejected():
    with pytest.raises(InputError) as err:
        make_batch(
            [[1.0], [2.0]],
            [[1.0], [2.0]],
            holdout_actuals=[[1.0, 2.0]] * 2,
            holdout_forecasts=[[1.0, 2.0]] * 2,
            holdout_lower=[[0.0, 0.0], [0.0, 3.0]],
            holdout_upper=[[2.0, 2.0], [2.0, 2.5]],
        )
    assert err.value.argument == "holdout_lower" and err.value.index == 1
    assert "step 2" in str(err.value)
