"""Robust portmanteau test (Dalla, Giraitis & Phillips 2022) against the authors' own
implementation, a direct per-series computation and exact identities."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from service.core import InputError
from service.core import robust_portmanteau as rp_module
from service.core.robust_portmanteau import (
    robust_lag_mask,
    robust_lag_statistics,
    robust_portmanteau,
)
from tests.reference_values import (
    TESTCORR_MACRO_Q10,
    TESTCORR_MACRO_T,
    TESTCORR_NILE_Q_196,
    TESTCORR_NILE_Q_2576,
    TESTCORR_NILE_T,
    TESTCORR_RTOL,
    TESTCORR_SUNSPOTS_Q2,
    TESTCORR_SUNSPOTS_T,
    macro_residuals,
    nile,
    sunspots,
)

from .reference_data import residuals

RTOL = 1e-8

# tests/reference_values.py TESTCORR_*: the authors' R package testcorr (ac.test, version
# 0.2.0, run in R 4.2.2), printed to 15 significant digits (TESTCORR_RTOL = 1e-12).
NILE_T = TESTCORR_NILE_T
NILE_Q_196 = TESTCORR_NILE_Q_196
NILE_Q_2576 = TESTCORR_NILE_Q_2576
MACRO_T = TESTCORR_MACRO_T
MACRO_Q10 = TESTCORR_MACRO_Q10
SUN_T = TESTCORR_SUNSPOTS_T
REF_RTOL = TESTCORR_RTOL


def _nile() -> np.ndarray:
    # tests/reference_values.py nile: statsmodels' datasets.nile (T = 100).
    return nile()


def _sunspots() -> np.ndarray:
    # tests/reference_values.py sunspots: statsmodels' datasets.sunspots (T = 309).
    return sunspots()


def direct_robust_q(
    x: np.ndarray, lags: list[int], lam: float
) -> tuple[np.ndarray, float, np.ndarray]:
    """Plain per-series implementation of t~ and Q~ for one series with gaps (NaN), lags in
    any order: e centred at the mean of the observed values, t counted from the first observed
    value, a product present only where both values are observed."""
    x = np.asarray(x, dtype=float)
    first = int(np.flatnonzero(~np.isnan(x))[0])
    last = int(np.flatnonzero(~np.isnan(x))[-1])
    x = x[first : last + 1]
    e = x - np.nanmean(x)
    n = e.size
    prods = {}
    for k in lags:
        col = np.zeros(n)
        for t in range(k, n):
            if not np.isnan(e[t]) and not np.isnan(e[t - k]):
                col[t] = e[t] * e[t - k]
        prods[k] = col
    t_stat = np.array([prods[k].sum() / np.sqrt((prods[k] ** 2).sum()) for k in lags])
    big_k = len(lags)
    r_star = np.eye(big_k)
    for a in range(big_k):
        for b in range(big_k):
            if a == b:
                continue
            j, k = lags[a], lags[b]
            m = max(j, k)
            num = float(prods[j] @ prods[k])
            tau = num / np.sqrt((prods[j][m:] ** 2 * prods[k][m:] ** 2).sum())
            if abs(tau) > lam:
                r_star[a, b] = num / np.sqrt((prods[j][m:] ** 2).sum() * (prods[k][m:] ** 2).sum())
    if np.linalg.eigvalsh(r_star)[0] <= 1e-8:  # not positive definite: the diagonal form
        return t_stat, float(t_stat @ t_stat), r_star
    return t_stat, float(t_stat @ np.linalg.solve(r_star, t_stat)), r_star


# --- The authors' implementation ------------------------------------------------------------


@pytest.mark.parametrize(("lam", "expected"), [(1.96, NILE_Q_196), (2.576, NILE_Q_2576)])
def test_nile_matches_testcorr(lam, expected):
    x = _nile()
    st = robust_lag_statistics(x[None, :], 5, threshold=lam)
    np.testing.assert_allclose(st["t"][0], NILE_T, rtol=REF_RTOL)
    for m in range(1, 6):
        result = robust_portmanteau(x[None, :], lags=m, threshold=lam)
        np.testing.assert_allclose(result.statistic[0], expected[m - 1], rtol=REF_RTOL)
        assert not result.details["diagonal_fallback"][0]
        # Chi-square with m degrees of freedom (testcorr: 1 - pchisq(q, m)).
        np.testing.assert_allclose(result.p_value[0], stats.chi2.sf(expected[m - 1], m), rtol=1e-10)
    # At m >= 2 the threshold keeps off-diagonal terms: R* is not the identity here.
    assert robust_portmanteau(x[None, :], lags=5, threshold=lam).details["kept_pairs"][0] > 0


def test_macro_residuals_match_testcorr():
    e = macro_residuals()
    st = robust_lag_statistics(e[None, :], 10)
    np.testing.assert_allclose(st["t"][0], MACRO_T, rtol=REF_RTOL)
    result = robust_portmanteau(e[None, :], lags=10)
    np.testing.assert_allclose(result.statistic[0], MACRO_Q10, rtol=REF_RTOL)
    # No |tau_jk| passes 1.96 on MACRO: R* = I and Q~ is the sum of squares (identity below).
    assert result.details["kept_pairs"][0] == 0
    np.testing.assert_allclose(MACRO_Q10, np.sum(np.square(MACRO_T)), rtol=REF_RTOL)


def test_indefinite_r_star_falls_back_to_the_diagonal_form():
    # Sunspots, lags 1..3 at lambda 1.96: the thresholded R* has a negative eigenvalue.
    # testcorr still solves with it (its Q~_3 = 60.930248871316); we use sum t~_k^2 instead
    # and say so in details.
    x = _sunspots()
    result = robust_portmanteau(x[None, :], lags=3)
    st = robust_lag_statistics(x[None, :], 3)
    np.testing.assert_allclose(st["t"][0], SUN_T, rtol=REF_RTOL)
    assert result.details["diagonal_fallback"][0]
    assert result.details["min_eigenvalue"][0] < 0
    np.testing.assert_allclose(result.statistic[0], np.sum(np.square(SUN_T)), rtol=REF_RTOL)
    # With two lags R* is still positive definite and the value is testcorr's Q~_2
    # (tests/reference_values.py TESTCORR_SUNSPOTS_Q2).
    two = robust_portmanteau(x[None, :], lags=2)
    assert not two.details["diagonal_fallback"][0]
    np.testing.assert_allclose(two.statistic[0], TESTCORR_SUNSPOTS_Q2, rtol=REF_RTOL)


# --- Direct computation -----------------------------------------------------------------------


@pytest.mark.parametrize("lam", [0.0, 1.0, 1.96, 2.576])
def test_batch_matches_direct_per_series_computation(lam):
    rng = np.random.default_rng(42)
    lengths = [40, 52, 77, 104, 156]
    rows = []
    for i, n in enumerate(lengths):
        # Invented: AR(1) noise with a GARCH-like volatility, so some |tau_jk| pass the threshold.
        u = rng.normal(size=n) * np.exp(0.5 * np.sin(np.arange(n) / 7.0))
        x = np.empty(n)
        x[0] = u[0]
        for t in range(1, n):
            x[t] = 0.3 * (i % 3) * x[t - 1] + u[t]
        rows.append(x)
    rows[1][[5, 6, 30]] = np.nan  # interior gaps
    rows[3][:4] = np.nan  # a late start (missing fitted values)
    rows[4][[0, 77, 100]] = np.nan
    res = residuals(rows)
    width = 2 * 12
    mask = np.zeros((len(rows), width), dtype=bool)
    mask[:, :6] = True  # lags 1..6 for every series
    mask[2, 6:10] = True  # lags 7..10 for one series only
    mask[3, [11, 23]] = True  # seasonal lags 12 and 24 for another
    mask[4, 1] = False  # a hole: lag 2 not tested for the last one
    result = robust_portmanteau(res, lags=mask, threshold=lam)
    st = robust_lag_statistics(res, mask, threshold=lam)
    for i, x in enumerate(rows):
        lags = [int(k) for k in np.flatnonzero(mask[i]) + 1]
        t_ref, q_ref, r_star = direct_robust_q(x, lags, lam)
        np.testing.assert_allclose(result.statistic[i], q_ref, rtol=RTOL)
        assert result.details["lags"][i] == len(lags)
        assert result.details["df"][i] == len(lags)
        assert result.details["max_lag"][i] == max(lags)
        cols = [int(np.flatnonzero(st["lag_values"] == k)[0]) for k in lags]
        np.testing.assert_allclose(st["t"][i, cols], t_ref, rtol=RTOL)
        untested = np.setdiff1d(np.arange(st["lag_values"].size), cols)
        assert np.isnan(st["t"][i, untested]).all()
        np.testing.assert_allclose(result.p_value[i], stats.chi2.sf(q_ref, len(lags)), rtol=RTOL)
        # The smallest eigenvalue of the direct R* (numpy.linalg.eigvalsh, on all tested lags;
        # ours runs on the lags in kept pairs): equal to rounding, absolute as eigenvalues are.
        smallest = np.linalg.eigvalsh(r_star)[0]
        np.testing.assert_allclose(st["min_eigenvalue"][i], smallest, rtol=0, atol=1e-13)
        assert result.details["diagonal_fallback"][i] == (smallest <= 1e-8)
        pairs = np.count_nonzero(np.triu(r_star, 1))
        assert result.details["kept_pairs"][i] == st["kept_pairs"][i] == pairs


def test_default_lags_and_model_params():
    rng = np.random.default_rng(5)
    x = rng.standard_t(5, size=(3, 104))
    res = residuals(list(x))
    result = robust_portmanteau(res, season_length=52, model_params=2)
    for i in range(3):
        lags = [*range(1, 11), 52]  # robust_lag_mask(104, 52): lags 1..10 and 52
        _, q_ref, _ = direct_robust_q(x[i], lags, 1.96)
        np.testing.assert_allclose(result.statistic[i], q_ref, rtol=RTOL)
        assert result.details["df"][i] == 11 - 2
        np.testing.assert_allclose(result.p_value[i], stats.chi2.sf(q_ref, 9), rtol=RTOL)


def test_robust_lag_mask_docstring_values():
    mask = robust_lag_mask(np.array([104, 40, 156, 12]), 52)
    assert list(np.flatnonzero(mask[0]) + 1) == [*range(1, 11), 52]
    assert list(np.flatnonzero(mask[1]) + 1) == list(range(1, 9))  # floor(40 / 5) = 8
    assert list(np.flatnonzero(mask[2]) + 1) == [*range(1, 11), 52]  # 104 > 156 / 2
    assert list(np.flatnonzero(mask[3]) + 1) == [1, 2]
    assert list(np.flatnonzero(robust_lag_mask(np.array([60]))[0]) + 1) == list(range(1, 11))


# --- Exact identities -------------------------------------------------------------------------


def test_single_lag_is_the_square_of_the_robust_t():
    rng = np.random.default_rng(9)
    x = rng.normal(size=(6, 50))
    st = robust_lag_statistics(x, [1])
    result = robust_portmanteau(x, lags=[1])
    np.testing.assert_allclose(result.statistic, st["t"][:, 0] ** 2, rtol=1e-13)
    np.testing.assert_allclose(result.details["t_lag1"], st["t"][:, 0], rtol=1e-13)
    # A single lag has no off-diagonal entry whatever the threshold.
    zero = robust_portmanteau(x, lags=[3], threshold=0.0)
    np.testing.assert_allclose(
        zero.statistic, robust_lag_statistics(x, [3])["t"][:, 0] ** 2, rtol=1e-13
    )


def test_unmet_threshold_gives_the_sum_of_squares():
    rng = np.random.default_rng(10)
    x = rng.normal(size=(5, 80)).cumsum(axis=1)  # strongly autocorrelated: pairs kept at 1.96
    st = robust_lag_statistics(x, 6, threshold=np.inf)
    result = robust_portmanteau(x, lags=6, threshold=np.inf)
    assert (result.details["kept_pairs"] == 0).all()
    np.testing.assert_allclose(result.statistic, (st["t"] ** 2).sum(axis=1), rtol=1e-13)
    assert (robust_portmanteau(x, lags=6).details["kept_pairs"] > 0).any()


def test_robust_t_is_the_self_normalised_sum_of_products():
    # t~_k = sum e_t e_{t-k} / sqrt(sum (e_t e_{t-k})^2), e centred (direct formula, no gaps).
    rng = np.random.default_rng(11)
    x = rng.gamma(2.0, size=70)
    e = x - x.mean()
    st = robust_lag_statistics(x[None, :], [2, 5])
    for col, k in enumerate([2, 5]):
        p = e[k:] * e[:-k]
        np.testing.assert_allclose(st["t"][0, col], p.sum() / np.sqrt((p * p).sum()), rtol=1e-13)


def test_scale_and_shift_invariance():
    rng = np.random.default_rng(12)
    x = rng.normal(size=(4, 60))
    base = robust_portmanteau(x, lags=8)
    for a, b in ((1e100, 3e100), (1e-100, -7e-100), (250.0, 1e3)):
        other = robust_portmanteau(a * x + b, lags=8)
        np.testing.assert_allclose(other.statistic, base.statistic, rtol=1e-9)


# --- Batch behaviour --------------------------------------------------------------------------


def test_rows_do_not_depend_on_chunking_or_stacking(monkeypatch):
    rng = np.random.default_rng(13)
    x = rng.normal(size=(9, 52))
    x[2, 40:] = np.nan
    x[5, [3, 4]] = np.nan
    full = robust_portmanteau(x, season_length=4)
    monkeypatch.setattr(rp_module, "MAX_CHUNK_ROWS", 2)
    chunked = robust_portmanteau(x, season_length=4)
    np.testing.assert_array_equal(full.statistic, chunked.statistic)
    stacked = robust_portmanteau(np.vstack([x, x]), season_length=4)
    np.testing.assert_array_equal(stacked.statistic[:9], full.statistic)
    np.testing.assert_array_equal(stacked.statistic[9:], full.statistic)


def test_skips_and_short_series():
    rng = np.random.default_rng(14)
    rows = [
        np.full(30, 2.0),  # constant
        np.array([1.0, -1.0]),  # one pair at lag 1 only
        rng.normal(size=30),
        np.array([np.nan, 3.0]),  # one residual
    ]
    res = residuals(rows)
    result = robust_portmanteau(res, lags=5)
    assert result.skip_reason[0] == "residuals are constant, so autocorrelation is undefined"
    # Lags beyond the span are dropped: the two-value series tests lag 1 alone.
    assert result.details["lags"][1] == 1
    assert result.skip_reason[2] is None and result.details["lags"][2] == 5
    assert result.skip_reason[3] == "fewer than 2 residuals"
    with_params = robust_portmanteau(res, lags=5, model_params=5)
    assert with_params.skip_reason[2].startswith("no degrees of freedom left")


def test_bad_options_name_the_argument():
    x = np.random.default_rng(0).normal(size=(2, 30))
    for kwargs, name in (
        ({"lags": 0}, "lags"),
        ({"lags": [0, 1]}, "lags"),
        ({"lags": np.ones((3, 4), dtype=bool)}, "lags"),
        ({"lags": "ten"}, "lags"),
        ({"model_params": -1}, "model_params"),
        ({"threshold": -1.0}, "threshold"),
    ):
        with pytest.raises(InputError) as err:
            robust_portmanteau(x, **kwargs)
        assert err.value.argument == name
