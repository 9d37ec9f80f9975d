"""MASE: published exercise numbers and the naive-forecast invariant."""

from __future__ import annotations

import numpy as np
import pytest

from service.core import InputError, make_batch, mase, naive_scale
from tests.reference_values import (
    MASE_EXERCISE,
    MASE_EXERCISE_ATOL,
    MASE_EXERCISE_HOLDOUT_ACTUALS,
    MASE_EXERCISE_HOLDOUT_FORECASTS,
    MASE_EXERCISE_HOLDOUT_MAE,
    MASE_EXERCISE_NAIVE_SCALE,
    MASE_EXERCISE_SEASONAL_2_SCALE,
    MASE_EXERCISE_TRAIN,
    MASE_OF_IN_SAMPLE_NAIVE,
)

RTOL = 1e-8
# tests/reference_values.py MASE_EXERCISE_TRAIN: 18, 13, 16, 11, 17, 14 (a published exercise).
TRAIN = list(MASE_EXERCISE_TRAIN)


def test_naive_scale_published_and_computed():
    # tests/reference_values.py MASE_EXERCISE_NAIVE_SCALE: naive MAE 4.40 (a published
    # exercise answer).
    np.testing.assert_allclose(
        naive_scale(np.array([TRAIN]), 1), [MASE_EXERCISE_NAIVE_SCALE], rtol=RTOL
    )
    # tests/reference_values.py MASE_EXERCISE_SEASONAL_2_SCALE (computed): m = 2 has scale 2.0.
    np.testing.assert_allclose(
        naive_scale(np.array([TRAIN]), 2), [MASE_EXERCISE_SEASONAL_2_SCALE], rtol=RTOL
    )


# tests/reference_values.py MASE_EXERCISE (computed): holdout actuals [15, 19], forecasts
# [14, 14]: MAE 3, so MASE 0.681818 (printed to 6 decimals) for m = 1 and 1.5 for m = 2.
@pytest.mark.parametrize(("m", "value", "scale"), MASE_EXERCISE)
def test_mase_exercise(m, value, scale):
    batch = make_batch(
        [TRAIN],
        [[None, *TRAIN[:-1]]],
        season_length=m,
        holdout_actuals=[list(MASE_EXERCISE_HOLDOUT_ACTUALS)],
        holdout_forecasts=[list(MASE_EXERCISE_HOLDOUT_FORECASTS)],
    )
    result = mase(batch)
    np.testing.assert_allclose(result.statistic[0], value, atol=MASE_EXERCISE_ATOL)
    np.testing.assert_allclose(result.statistic[0], MASE_EXERCISE_HOLDOUT_MAE / scale, rtol=RTOL)
    assert result.details["scale"][0] == pytest.approx(scale, rel=RTOL)
    assert result.details["mae"][0] == MASE_EXERCISE_HOLDOUT_MAE
    assert result.details["horizon"][0] == 2
    assert result.kind == "metric" and np.isnan(result.p_value[0])


@pytest.mark.parametrize("m", [1, 4, 12])
def test_in_sample_naive_forecast_scores_exactly_one(m):
    # tests/reference_values.py MASE_OF_IN_SAMPLE_NAIVE (Hyndman & Koehler 2006): the
    # in-sample (seasonal) naive forecast scores MASE 1 exactly.
    rng = np.random.default_rng(m)
    y = rng.normal(50, 8, (5, 60)).round(1)
    y[2, 40:] = np.nan  # a shorter series (ragged)
    batch = make_batch(y, y, season_length=m, holdout_actuals=y[:, m:], holdout_forecasts=y[:, :-m])
    assert (mase(batch).statistic == MASE_OF_IN_SAMPLE_NAIVE).all()


def test_gaps_use_pairs_with_both_values():
    y = np.array([[10.0, 12.0, np.nan, 11.0, 15.0, 14.0, 13.0]])
    # computed: pairs (10,12) (11,15) (15,14) (14,13): |d| = 2, 4, 1, 1 -> scale 2.
    np.testing.assert_allclose(naive_scale(y, 1), [2.0], rtol=RTOL)
    # A missing holdout step is not scored (computed: MAE (3 + 3) / 2 = 3, MASE 1.5).
    batch = make_batch(
        y, y, holdout_actuals=[[16.0, np.nan, 10.0]], holdout_forecasts=[[13.0, 13.0, 13.0]]
    )
    result = mase(batch)
    assert result.details["horizon"][0] == 2
    np.testing.assert_allclose(result.statistic[0], 3.0 / 2.0, rtol=RTOL)


def test_skips_with_reasons():
    batch = make_batch(
        [[5.0, 5.0, 5.0, 5.0], [1.0, 2.0, 3.0, 4.0], [1.0, 2.0, None, None], [3.0, 1.0, 2.0, 8.0]],
        [[5.0] * 4, [1.0] * 4, [1.0, 1.0, None, None], [3.0] * 4],
        season_length=2,
        holdout_actuals=[[5.0, 6.0], [5.0, 6.0], [1.0, 1.0], [None, None]],
        holdout_forecasts=[[5.0, 5.0], [4.0, 4.0], [1.0, 2.0], [3.0, 3.0]],
    )
    result = mase(batch)
    assert result.skip_reason[0] == (
        "the in-sample naive forecast is exact (constant series), so the scale is 0"
    )
    assert result.skip_reason[1] is None
    assert result.skip_reason[2] == "training series too short for a lag-2 naive forecast"
    assert result.skip_reason[3] == "no holdout"
    no_holdout = mase(make_batch([[1.0, 2.0, 3.0]], [[1.0, 2.0, 3.0]]))
    assert no_holdout.skip_reason[0] == "no holdout"


def test_bad_season_length_names_the_argument():
    with pytest.raises(InputError) as err:
        naive_scale(np.array([TRAIN]), 0)
    assert err.value.argument == "season_length"
