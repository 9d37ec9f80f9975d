"""EWC bias test (Lazarus, Lewis, Stock & Watson 2018): the cosine algebra against scipy's DCT,
exact identities and a direct per-series computation."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import fft, stats

from service.core import InputError
from service.core.ewc import (
    cosine_projections,
    ewc_bias,
    ewc_bins,
    ewc_long_run_variance,
    series_bins,
)
from tests.reference_values import X20

from .reference_data import observed, residuals

RTOL = 1e-8


def direct_ewc(x: np.ndarray, b: int, level: float = 0.95) -> dict[str, float]:
    """Plain per-series EWC t test: the observed values in their order, loops over j and t."""
    e = observed(x)
    n = e.size
    mean = e.mean()
    lam = []
    for j in range(1, b + 1):
        s = 0.0
        for t in range(1, n + 1):
            s += np.cos(np.pi * j * (t - 0.5) / n) * (e[t - 1] - mean)
        lam.append(np.sqrt(2.0 / n) * s)
    omega = np.mean(np.square(lam))
    se = np.sqrt(omega / n)
    t = mean / se
    q = stats.t.ppf(0.5 + level / 2, b)
    return {
        "t": t,
        "p": 2 * stats.t.sf(abs(t), b),
        "se": se,
        "omega": omega,
        "low": mean - q * se,
        "high": mean + q * se,
    }


# --- The rule for B ---------------------------------------------------------------------------


def test_bins_docstring_values():
    # Lazarus, Lewis, Stock & Watson (2018), eq. 4: floor(0.4 T^(2/3)); floor of 2 below T = 12.
    n = np.array([2, 3, 4, 11, 12, 20, 30, 52, 104, 125, 156, 1000])
    assert list(ewc_bins(n)) == [1, 2, 2, 2, 2, 2, 3, 5, 8, 10, 11, 40]


def test_bins_rule_is_exact_in_integers():
    # computed: the largest B with B <= 0.4 T^(2/3), i.e. 125 B^3 <= 8 T^2, by brute force.
    n = np.arange(12, 5001)
    expected = np.array([max(b for b in range(0, 200) if 125 * b**3 <= 8 * t * t) for t in n])
    np.testing.assert_array_equal(ewc_bins(n), np.maximum(expected, 2))
    # Where 0.4 T^(2/3) is an integer the float formula can land just below it: T = 1000
    # gives 39.99999999999999, the exact rule 40.
    assert np.floor(0.4 * 1000 ** (2 / 3)) == 39 and ewc_bins(1000) == 40


# --- The cosine algebra ----------------------------------------------------------------------


@pytest.mark.parametrize("n", [3, 7, 20, 52, 101])
def test_projections_are_the_orthonormal_type_ii_dct(n):
    rng = np.random.default_rng(n)
    z = rng.normal(size=(3, n))
    b = np.full(3, n - 1)
    lam = cosine_projections(z, np.full(3, n), b)
    # scipy.fft.dct(type=2, norm="ortho")[j] = sqrt(2/T) sum_t cos(pi j (t - 1/2) / T) z_t, j >= 1
    ref = fft.dct(z, type=2, norm="ortho", axis=1)[:, 1:]
    np.testing.assert_allclose(lam, ref, rtol=1e-10, atol=1e-13 * np.abs(z).max())


def test_projections_of_ragged_rows_use_each_rows_length():
    rng = np.random.default_rng(1)
    lengths = np.array([5, 12, 30])
    packed = np.zeros((3, 30))
    for i, n in enumerate(lengths):
        packed[i, :n] = rng.normal(size=n)
    b = np.array([2, 4, 6])
    lam = cosine_projections(packed, lengths, b)
    for i, n in enumerate(lengths):
        ref = fft.dct(packed[i, :n], type=2, norm="ortho")[1 : b[i] + 1]
        np.testing.assert_allclose(lam[i, : b[i]], ref, rtol=1e-10, atol=1e-14)
        assert (lam[i, b[i] :] == 0).all()


def test_constant_plus_cosine_loads_on_one_term():
    # z_t = c + a cos(pi 3 (t - 1/2) / T): Lambda_3 = a sqrt(T / 2), every other Lambda_j = 0
    # (the cosines are orthogonal to each other and to the constant).
    n = 40
    t = np.arange(1, n + 1)
    z = 5.0 + 2.0 * np.cos(np.pi * 3 * (t - 0.5) / n)
    lam = cosine_projections(z[None, :], np.array([n]), np.array([10]))[0]
    expected = np.zeros(10)
    expected[2] = 2.0 * np.sqrt(n / 2)
    np.testing.assert_allclose(lam, expected, atol=1e-12)


def test_basis_is_orthonormal_and_orthogonal_to_the_mean():
    # The projections of the unit vectors give the basis itself: C C' = I, C 1 = 0.
    n = 25
    basis = cosine_projections(np.eye(n), np.full(n, n), np.full(n, n - 1)).T  # (T - 1, T)
    np.testing.assert_allclose(basis @ basis.T, np.eye(n - 1), atol=1e-13)
    np.testing.assert_allclose(basis @ np.ones(n), 0.0, atol=1e-13)


def test_t_is_the_ratio_of_the_zeroth_dct_term_to_the_next_b():
    # With y = dct(e, type=2, norm="ortho"): y_0 = sqrt(T) mean and t = y_0 / sqrt(mean(y_j^2),
    # j = 1..B) -- a standard normal over an independent chi2_B / B under iid normal errors,
    # so t ~ t_B exactly (the exactness claim of the docstring; measured in the perf study).
    rng = np.random.default_rng(3)
    x = rng.normal(0.3, 1.0, size=(5, 52))
    result = ewc_bias(x)
    y = fft.dct(x, type=2, norm="ortho", axis=1)
    b = 5  # ewc_bins(52)
    t_ref = y[:, 0] / np.sqrt(np.mean(y[:, 1 : b + 1] ** 2, axis=1))
    np.testing.assert_allclose(result.statistic, t_ref, rtol=1e-12)
    np.testing.assert_allclose(result.p_value, 2 * stats.t.sf(np.abs(t_ref), b), rtol=1e-10)


def test_series_rule_takes_a_sixth_of_t_and_never_fewer_than_the_paper():
    # The per-series bias test's rule (a project choice; the README's gate study): B =
    # max(floor(T / 6), floor(0.4 T^(2/3)), 2), at most T - 1. The rule written out again for
    # T up to 3,000 (with LLSW's term by the integer search b^3 <= 0.064 T^2, independent of
    # ewc_bins), then values worked by hand from the rule.
    n = np.arange(2, 3001)
    llsw = np.array([max(b for b in range(0, 200) if 1000 * b**3 <= 64 * t * t) for t in n])
    expected = np.minimum(np.maximum(np.maximum(n // 6, llsw), 2), n - 1)
    np.testing.assert_array_equal(series_bins(n), expected)
    # By hand: T = 104 -> floor(17.33) = 17 against floor(0.4 * 22.1) = 8; T = 20 -> 3.
    got = series_bins(np.array([3, 10, 20, 30, 52, 104, 156, 260]))
    assert got.tolist() == [2, 2, 3, 5, 8, 17, 26, 43]


def test_all_cosines_give_the_one_sample_t_test():
    # B = T - 1: the T - 1 cosines and the constant are an orthonormal basis, so Omega is the
    # sample variance (ddof 1) and the EWC test is the one-sample t test (scipy.stats.ttest_1samp).
    rng = np.random.default_rng(31)
    x = rng.normal(0.2, 1.0, size=(4, 40))
    result = ewc_bias(x, bins=39)
    ref = stats.ttest_1samp(x, 0.0, axis=1)
    np.testing.assert_allclose(result.statistic, ref.statistic, rtol=1e-10)
    np.testing.assert_allclose(result.p_value, ref.pvalue, rtol=1e-8)


def test_the_check_rule_at_104_periods_against_scipy_dct():
    # T = 104: B = 17 (floor(104 / 6)); t = y_0 / sqrt(mean(y_j^2), j = 1..17) with y the
    # orthonormal DCT-II of the residuals (scipy.fft.dct), p from scipy's t with 17 df.
    rng = np.random.default_rng(104)
    x = rng.normal(0.25, 1.0, size=(3, 104))
    result = ewc_bias(x, bins=series_bins(np.full(3, 104)))
    y = fft.dct(x, type=2, norm="ortho", axis=1)
    t_ref = y[:, 0] / np.sqrt(np.mean(y[:, 1:18] ** 2, axis=1))
    np.testing.assert_allclose(result.statistic, t_ref, rtol=1e-12)
    np.testing.assert_allclose(result.p_value, 2 * stats.t.sf(np.abs(t_ref), 17), rtol=1e-10)
    assert (result.details["df"] == 17).all()


def test_per_series_bins_match_one_at_a_time():
    rng = np.random.default_rng(8)
    x = rng.normal(0.0, 1.0, size=(3, 60))
    b = np.array([2, 7, 13])
    whole = ewc_bias(x, bins=b)
    for i in range(3):
        one = ewc_bias(x[i : i + 1], bins=int(b[i]))
        assert whole.statistic[i] == one.statistic[0] and whole.details["df"][i] == b[i]


# --- Direct computation ----------------------------------------------------------------------


@pytest.mark.parametrize("bins", [None, 1, 3, 7])
def test_batch_matches_direct_per_series_computation(bins):
    rng = np.random.default_rng(7)
    lengths = [3, 8, 20, 52, 104, 156]
    rows = [rng.normal(rng.uniform(-0.5, 0.5), 1.0, n) for n in lengths]
    rows[3][[4, 5, 40]] = np.nan  # gaps: closed up, the observed residuals in their order
    rows[5][:2] = np.nan
    res = residuals(rows)
    result = ewc_bias(res, bins=bins)
    omega = ewc_long_run_variance(res, bins)
    for i, row in enumerate(rows):
        n = observed(row).size
        b = int(ewc_bins(n)) if bins is None else min(bins, n - 1)
        ref = direct_ewc(row, b)
        assert result.details["bins"][i] == b == result.details["df"][i]
        np.testing.assert_allclose(result.statistic[i], ref["t"], rtol=RTOL)
        np.testing.assert_allclose(result.p_value[i], ref["p"], rtol=RTOL)
        np.testing.assert_allclose(result.details["std_error"][i], ref["se"], rtol=RTOL)
        np.testing.assert_allclose(omega[i], ref["omega"], rtol=RTOL)
        np.testing.assert_allclose(result.details["ci_low"][i], ref["low"], rtol=RTOL)
        np.testing.assert_allclose(result.details["ci_high"][i], ref["high"], rtol=RTOL)
        np.testing.assert_allclose(result.details["mean_error"][i], observed(row).mean())


def test_x20_value():
    # tests/reference_values.py X20 (statsmodels' test_statstools.py): T = 20, B = 2.
    ref = direct_ewc(X20, 2, level=0.9)
    result = ewc_bias(residuals([X20]), ci_level=0.9)
    np.testing.assert_allclose(result.statistic[0], ref["t"], rtol=RTOL)
    np.testing.assert_allclose(result.details["ci_low"][0], ref["low"], rtol=RTOL)
    np.testing.assert_allclose(result.details["ci_high"][0], ref["high"], rtol=RTOL)


def test_percent_bias_and_scale_free():
    rng = np.random.default_rng(4)
    x = rng.normal(0.4, 1.0, size=(2, 40))
    scale = np.array([10.0, 20.0])
    result = ewc_bias(x, scale)
    np.testing.assert_allclose(result.details["percent_bias"], 100 * x.mean(axis=1) / scale)
    big = ewc_bias(x * 1e120)
    np.testing.assert_allclose(big.statistic, result.statistic, rtol=1e-12)
    assert np.isnan(ewc_bias(x).details["percent_bias"]).all()


def test_edge_cases_follow_the_bias_check():
    rows = [
        np.full(30, 0.1),  # constant, not zero: biased for certain
        np.zeros(30),  # perfect fit
        np.array([1.0, -1.0]),  # too short
        np.array([np.nan] * 10),  # nothing observed
    ]
    result = ewc_bias(residuals(rows))
    assert np.isposinf(result.statistic[0]) and result.p_value[0] == 0
    assert result.skip_reason[1] == "residuals are all zero"
    assert result.skip_reason[2] == "fewer than 3 residuals"
    assert result.skip_reason[3] == "fewer than 3 residuals"


def test_bad_options_name_the_argument():
    x = np.random.default_rng(0).normal(size=(1, 20))
    for kwargs, name in (({"bins": 0}, "bins"), ({"ci_level": 1.0}, "ci_level")):
        with pytest.raises(InputError) as err:
            ewc_bias(x, **kwargs)
        assert err.value.argument == name


def test_one_cosine_term_would_make_a_useless_test():
    # EWC_MIN_BINS docstring: with B = 1 (Cauchy) the two-sided 5% critical value is 12.7
    # (stats.t.ppf(0.975, 1) = 12.706); with the floor of B = 2 it is 4.30.
    assert round(float(stats.t.ppf(0.975, 1)), 1) == 12.7
    assert round(float(stats.t.ppf(0.975, 2)), 2) == 4.30
    assert ewc_bins(11) == 2 and np.floor(0.4 * 11 ** (2 / 3)) == 1
