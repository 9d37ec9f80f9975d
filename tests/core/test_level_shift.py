"""Recent bias (level shift) t test against a direct computation with scipy."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from service.core import InputError, tracking_signal
from service.core.level_shift import level_shift

from .reference_data import observed, residuals

RTOL = 1e-8


@pytest.mark.parametrize("window", [6, 12])
def test_matches_direct_computation(window):
    rng = np.random.default_rng(6)
    rows = [rng.normal(0, 1, n) for n in (30, 52, 104)]
    rows[1][-window:] += 1.0
    rows[2][[10, 100]] = np.nan  # gaps: the window is the last `window` observed residuals
    res = residuals(rows)
    result = level_shift(res, window=window)
    for i, row in enumerate(rows):
        e = observed(row)
        last, pre = e[-window:], e[:-window]
        s = pre.std(ddof=1)
        t = last.mean() / (s / np.sqrt(window))
        np.testing.assert_allclose(result.statistic[i], t, rtol=RTOL)
        # Student t with n_pre - 1 degrees of freedom, two-sided.
        np.testing.assert_allclose(
            result.p_value[i], 2 * stats.t.sf(abs(t), pre.size - 1), rtol=RTOL
        )
        np.testing.assert_allclose(result.details["std_before"][i], s, rtol=RTOL)
        np.testing.assert_allclose(result.details["mean_recent"][i], last.mean(), rtol=RTOL)
        assert result.details["df"][i] == pre.size - 1
        # The trade's tracking signal over the same window (common practice).
        np.testing.assert_allclose(
            result.details["tracking_signal"][i], last.sum() / np.abs(last).mean(), rtol=RTOL
        )


def test_t_is_the_one_sample_t_construction():
    # t^2 = w mean_last^2 / s_pre^2: with the window standing alone as a sample of size w and
    # the variance taken from elsewhere, scipy's ttest_1samp of the window times
    # s_window / s_pre gives the same statistic (computed: algebra of the one-sample t).
    rng = np.random.default_rng(8)
    e = rng.normal(0.2, 1.5, 60)
    result = level_shift(residuals([e]), window=12)
    last, pre = e[-12:], e[:-12]
    ref = stats.ttest_1samp(last, 0.0).statistic * last.std(ddof=1) / pre.std(ddof=1)
    np.testing.assert_allclose(result.statistic[0], ref, rtol=1e-12)


def test_tracking_signal_agrees_with_the_existing_check():
    rng = np.random.default_rng(9)
    rows = [rng.normal(0.3, 1, 60), rng.normal(0, 1, 48)]
    res = residuals(rows)
    ours = level_shift(res, window=12)
    theirs = tracking_signal(res, window=12)
    np.testing.assert_allclose(ours.details["tracking_signal"], theirs.statistic, rtol=1e-12)


def test_skips_and_bad_options():
    rng = np.random.default_rng(10)
    rows = [
        rng.normal(size=20),  # 8 before a window of 12
        np.r_[np.full(20, 1.0), rng.normal(size=12)],  # constant before the window
        np.r_[rng.normal(size=20), np.zeros(12)],  # window all zero
        rng.normal(size=40),
    ]
    res = residuals(rows)
    result = level_shift(res, window=12)
    assert result.skip_reason[0] == "fewer than 12 residuals before the last 12"
    assert result.skip_reason[1] == "residuals before the window are constant"
    assert result.skip_reason[2] == "the last 12 residuals are all zero"
    assert result.skip_reason[3] is None
    assert level_shift(res, window=12, min_pre=5).skip_reason[0] is None
    for bad in (0, 2.5, True):
        with pytest.raises(InputError) as err:
            level_shift(res, window=bad)
        assert err.value.argument == "window"
