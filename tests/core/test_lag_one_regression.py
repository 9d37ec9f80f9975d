"""The robust lag-1 regression test: HC2 against statsmodels, Bell-McCaffrey degrees of freedom
against their matrix definition, Welch's statistic for a binary regressor (scipy), and its place
in the autocorrelation check's weighted Bonferroni rule."""

from __future__ import annotations

import numpy as np
import pytest
import statsmodels.api as sm
from scipy import stats

from service.core.checks.autocorrelation import (
    TEST_WEIGHTS,
    autocorrelation_test,
    weighted_bonferroni,
)
from service.core.lag_one_regression import hc2_slope_test, lag_one_regression
from service.core.residual_arrays import as_residuals
from service.core.types import InputError

RTOL = 1e-10


def _bell_mccaffrey(x: np.ndarray) -> float:
    """``K_BM`` from its definition (Bell & McCaffrey 2002; Imbens & Kolesar 2016): the
    eigenvalues of ``G' G``, ``G = (I - H) D^(1/2)``, ``D = diag(a_i^2 / (1 - h_ii))``, with
    the ``n x n`` matrices built whole."""
    design = sm.add_constant(x)
    inverse = np.linalg.inv(design.T @ design)
    hat = design @ inverse @ design.T
    a = (inverse @ design.T)[1]
    d = np.diag(a * a / (1.0 - np.diag(hat)))
    g = (np.eye(x.size) - hat) @ np.sqrt(d)
    lam = np.linalg.eigvalsh(g.T @ g)
    return float(lam.sum() ** 2 / (lam * lam).sum())


def _invented_residuals() -> np.ndarray:
    """Invented residuals: four series of 40 periods, one with an interior gap, one starting
    late, one with an AR(1) 0.6 term."""
    rng = np.random.default_rng(20261204)
    e = rng.normal(size=(4, 40))
    e[1, 7] = np.nan
    e[2, :5] = np.nan
    for t in range(1, 40):
        e[3, t] += 0.6 * e[3, t - 1]
    return e


def test_hc2_t_and_bell_mccaffrey_df_match_statsmodels_and_the_definition():
    e = _invented_residuals()
    got = lag_one_regression(as_residuals(e))
    for i in range(e.shape[0]):
        x, y = e[i, :-1], e[i, 1:]
        ok = ~np.isnan(x) & ~np.isnan(y)
        # statsmodels: OLS of e_t on (1, e_{t-1}) with the HC2 covariance (MacKinnon & White 1985).
        fit = sm.OLS(y[ok], sm.add_constant(x[ok])).fit(cov_type="HC2")
        np.testing.assert_allclose(got.slope[i], fit.params[1], rtol=RTOL)
        np.testing.assert_allclose(got.t[i], fit.tvalues[1], rtol=RTOL)
        df = _bell_mccaffrey(x[ok])
        np.testing.assert_allclose(got.df[i], df, rtol=RTOL)
        np.testing.assert_allclose(
            got.p_value[i], 2 * stats.t.sf(abs(fit.tvalues[1]), df), rtol=1e-9
        )
        assert got.pairs[i] == ok.sum()


def test_unit_of_the_residuals_changes_nothing():
    e = _invented_residuals()
    small, large = lag_one_regression(as_residuals(e)), lag_one_regression(as_residuals(e * 1e9))
    np.testing.assert_allclose(small.t, large.t, rtol=1e-12)
    np.testing.assert_allclose(small.df, large.df, rtol=1e-12)


def test_binary_regressor_gives_welch_statistic():
    # With a binary regressor the HC2 variance is the unequal-variance variance of the difference
    # of the group means (Imbens & Kolesar 2016), so t is Welch's (scipy.stats.ttest_ind,
    # equal_var=False). Invented data.
    rng = np.random.default_rng(7)
    group = np.array([0.0] * 9 + [1.0] * 14)
    values = np.where(
        group == 1, rng.normal(0.8, 2.0, group.size), rng.normal(0.0, 0.7, group.size)
    )
    got = hc2_slope_test(group[None, :], values[None, :], np.ones((1, group.size), dtype=bool))
    welch = stats.ttest_ind(values[group == 1], values[group == 0], equal_var=False)
    np.testing.assert_allclose(got.t[0], welch.statistic, rtol=RTOL)
    np.testing.assert_allclose(got.df[0], _bell_mccaffrey(group), rtol=RTOL)


def test_untestable_rows_are_nan_and_an_exact_fit_has_p_zero():
    x = np.array([[1.0, 2.0, 3.0, 4.0], [2.0, 2.0, 2.0, 2.0], [1.0, 2.0, 3.0, 4.0]])
    y = np.array([[0.5, 1.0, 1.5, 2.0], [1.0, 3.0, 2.0, 5.0], [3.0, 1.0, 4.0, 1.0]])
    pairs = np.array([[True] * 4, [True] * 4, [True, True, False, False]])
    got = hc2_slope_test(x, y, pairs)
    assert got.t[0] == np.inf and got.p_value[0] == 0.0  # y = x / 2 exactly: no doubt left
    assert np.isnan(got.t[1]) and np.isnan(got.p_value[1])  # x constant: no slope
    assert np.isnan(got.t[2]) and got.pairs[2] == 2  # 2 pairs: too few
    short = lag_one_regression(as_residuals(np.array([[1.0]])))
    assert np.isnan(short.p_value[0]) and short.pairs[0] == 0


def test_weighted_bonferroni_normalises_over_the_tests_that_ran():
    nan = np.nan
    p, decided = weighted_bonferroni(
        (
            np.array([0.01, 0.01, nan, nan]),
            np.array([0.004, nan, 0.3, nan]),
            np.array([nan, 0.002, 0.2, nan]),
        ),
        (2.0, 1.0, 1.0),
    )
    # Row 0: weights 2/3 and 1/3: min(0.01 * 3/2, 0.004 * 3) = 0.012, from the short lags.
    # Row 1: 2/3 and 1/3 over lag 1 and seasonal: min(0.015, 0.006). Row 2: 1/2 each: 0.4.
    np.testing.assert_allclose(p[:3], [0.012, 0.006, 0.4], rtol=1e-15)
    assert decided.tolist() == [1, 2, 2, -1] and np.isnan(p[3])
    capped, _ = weighted_bonferroni((np.array([0.9]), np.array([0.8])), (2.0, 1.0))
    assert capped[0] == 1.0


def test_check_combines_lag1_short_and_seasonal_with_weights_2_1_1():
    e = _invented_residuals()
    rng = np.random.default_rng(3)
    wide = rng.normal(size=(2, 104))
    for t in range(1, 104):
        wide[1, t] += 0.5 * wide[1, t - 1]
    for batch, m in ((e, 1), (wide, 12)):
        result = autocorrelation_test(as_residuals(batch), season_length=m)
        d = result.details
        parts = [d["lag1_p_value"], d["short_p_value"], d["seasonal_p_value"]]
        ran = np.isfinite(np.vstack(parts))
        w = np.asarray(TEST_WEIGHTS)[:, None] * ran
        expected = np.nanmin(np.vstack(parts) * w.sum(axis=0) / np.where(ran, w, np.nan), axis=0)
        np.testing.assert_allclose(result.p_value, np.minimum(expected, 1.0), rtol=1e-12)
        assert (ran[2] == (m > 1)).all()
    ar = autocorrelation_test(as_residuals(wide), season_length=12)
    assert ar.details["decided_by"][1] == "lag1"
    assert ar.statistic[1] == pytest.approx(ar.details["lag1_t"][1])


def test_blocks_of_rows_give_each_row_its_own_answer():
    # More rows than one block holds (BLOCK_ELEMENTS cells): every row as if alone. Invented.
    rng = np.random.default_rng(11)
    e = rng.normal(size=(900, 156))
    e[::7, :9] = np.nan
    whole = lag_one_regression(as_residuals(e))
    for i in (0, 419, 420, 421, 899):
        alone = lag_one_regression(as_residuals(e[i : i + 1]))
        np.testing.assert_allclose(whole.t[i], alone.t[0], rtol=1e-13)
        np.testing.assert_allclose(whole.df[i], alone.df[0], rtol=1e-13)


def test_below_30_residuals_lag_1_stays_in_the_portmanteau():
    # LAG1_MIN_OBS: at T = 20 the check is the portmanteau on lags 1-3 alone; at T = 30 lag 1
    # goes to the regression and the portmanteau keeps lags 2-5 (ceil(ln 30) = 4, T/5 = 6).
    rng = np.random.default_rng(5)
    short, longer = rng.normal(size=(3, 20)), rng.normal(size=(3, 30))
    d = autocorrelation_test(as_residuals(short)).details
    assert np.isnan(d["lag1_p_value"]).all() and (d["short_first_lag"] == 1).all()
    np.testing.assert_array_equal(d["lags"], 3)
    d = autocorrelation_test(as_residuals(longer)).details
    assert np.isfinite(d["lag1_p_value"]).all() and (d["short_first_lag"] == 2).all()
    np.testing.assert_array_equal(d["short_last_lag"], 4)
    np.testing.assert_array_equal(d["lags"], 4)  # lags 1-4 tested: 1 by the regression
    np.testing.assert_array_equal(d["df"], 3)  # the portmanteau's lags 2-4
    fitted = autocorrelation_test(as_residuals(longer), model_params=1).details
    assert (fitted["short_first_lag"] == 1).all() and np.isfinite(fitted["lag1_p_value"]).all()


def test_lag1_weight_sets_the_regression_share_and_zero_restores_the_portmanteau_alone():
    # Invented residuals, 3 white-noise series and one AR(1) 0.5, T = 104.
    rng = np.random.default_rng(17)
    e = rng.normal(size=(4, 104))
    for t in range(1, 104):
        e[3, t] += 0.5 * e[3, t - 1]
    res = as_residuals(e)
    alone = autocorrelation_test(res, lag1_weight=0)
    d = alone.details
    assert np.isnan(d["lag1_p_value"]).all() and (d["short_first_lag"] == 1).all()
    assert (d["decided_by"] == "short").all()
    np.testing.assert_allclose(alone.p_value, d["short_p_value"], rtol=1e-15)
    even = autocorrelation_test(res, lag1_weight=1).details
    both = np.vstack([even["lag1_p_value"], even["short_p_value"]])
    np.testing.assert_allclose(
        autocorrelation_test(res, lag1_weight=1).p_value, np.minimum(2 * both.min(axis=0), 1.0)
    )
    with pytest.raises(InputError) as err:
        autocorrelation_test(res, lag1_weight=float("nan"))
    assert err.value.argument == "lag1_weight"
