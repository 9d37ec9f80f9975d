"""Christoffersen's independence and conditional-coverage tests and the fleet's pooled coverage
test, against scipy, statsmodels and the likelihood-ratio identities."""

from __future__ import annotations

import numpy as np
import pytest
import statsmodels.api as sm
from scipy import stats
from scipy.stats import chi2_contingency

from service.core import InputError, kupiec_lr, make_batch
from service.core.coverage_tests import (
    fleet_coverage,
    independence_lr,
    miss_dependence,
    transition_counts,
)

RTOL = 1e-8


def _batch(misses: np.ndarray, level: float = 0.9, gaps: np.ndarray | None = None):
    """Invented holdouts whose interval [-1, 1] misses where ``misses`` is 1."""
    misses = np.atleast_2d(misses)
    y = np.where(misses == 1, 2.0, 0.0)
    if gaps is not None:
        y = np.where(gaps, np.nan, y)
    n, h = y.shape
    return make_batch(
        np.ones((n, 3)),
        np.ones((n, 3)),
        holdout_actuals=y,
        holdout_forecasts=np.zeros((n, h)),
        holdout_lower=np.full((n, h), -1.0),
        holdout_upper=np.full((n, h), 1.0),
        level=level,
    )


def test_transition_counts_docstring():
    m = np.array([[0, 1, 1, 0, 0, 1]], dtype=bool)
    counts = transition_counts(m, np.ones_like(m))
    assert [int(c[0]) for c in counts] == [1, 2, 1, 1]


def test_independence_lr_docstring_value():
    # Christoffersen (1998), computed by hand for n = (1, 2, 1, 1).
    ref = 2 * (
        2 * np.log(2 / 3)
        + np.log(1 / 3)
        + 2 * np.log(1 / 2)
        - 2 * np.log(2 / 5)
        - 3 * np.log(3 / 5)
    )
    np.testing.assert_allclose(independence_lr(1, 2, 1, 1), ref, rtol=RTOL)
    np.testing.assert_allclose(ref, 0.138443, atol=5e-7)


def test_independence_lr_is_the_g_test_of_the_transition_table():
    # LR_ind is the likelihood-ratio test of independence in the 2 x 2 table of transitions:
    # scipy's chi2_contingency(lambda_="log-likelihood", correction=False).
    rng = np.random.default_rng(0)
    tables = rng.integers(1, 30, (40, 4))
    tables[:5, 3] = 0  # a zero cell (0 log 0 = 0)
    ours = independence_lr(*tables.T)
    for k in range(40):
        ref = chi2_contingency(
            tables[k].reshape(2, 2), correction=False, lambda_="log-likelihood"
        ).statistic
        np.testing.assert_allclose(ours[k], ref, rtol=RTOL, atol=1e-12)


def test_independence_lr_is_zero_when_the_transition_rates_agree():
    # pi0 = pi1: n01 / (n00 + n01) = n11 / (n10 + n11).
    np.testing.assert_allclose(
        independence_lr(
            np.array([4, 6, 9]), np.array([2, 3, 1]), np.array([2, 4, 18]), np.array([1, 2, 2])
        ),
        0.0,
        atol=1e-12,
    )


def test_miss_dependence_values_and_conditional_coverage():
    misses = np.array([[0, 1, 1, 0, 0, 1, 0, 0, 0, 1], [0, 0, 1, 0, 0, 0, 0, 1, 0, 0]])
    got = miss_dependence(_batch(misses, level=0.8))
    for i in range(2):
        m = misses[i].astype(bool)
        counts = [int(c[0]) for c in transition_counts(m[None, :], np.ones((1, 10), dtype=bool))]
        ind = independence_lr(*counts)
        pof = kupiec_lr(np.array([m.sum()]), np.array([10]), np.array([0.2]))[0]
        np.testing.assert_allclose(got.lr_ind[i], ind, rtol=RTOL)
        np.testing.assert_allclose(got.lr_pof[i], pof, rtol=RTOL)
        # Christoffersen (1998): LR_cc = LR_uc + LR_ind, chi-square with 2 df.
        np.testing.assert_allclose(got.lr_cc[i], pof + ind, rtol=RTOL)
        np.testing.assert_allclose(got.p_ind[i], stats.chi2.sf(ind, 1), rtol=RTOL)
        np.testing.assert_allclose(got.p_cc[i], stats.chi2.sf(pof + ind, 2), rtol=RTOL)
    assert got.n_scored.tolist() == [10, 10]


def test_gaps_break_the_chain():
    misses = np.array([[0, 1, 1, 0, 1, 0]])
    gaps = np.array([[False, False, True, False, False, False]])
    got = miss_dependence(_batch(misses, gaps=gaps))
    # Pairs (0,1) and (0,1), (1,0) only: the gap at step 3 removes (1,1) and (1,0).
    assert (got.n00[0], got.n01[0], got.n10[0], got.n11[0]) == (0, 2, 1, 0)


def test_skip_rules():
    misses = np.array([[0, 0, 0, 0, 0], [0, 0, 0, 0, 1], [1, 1, 1, 1, 1], [1, 0, 1, 0, 0]])
    got = miss_dependence(_batch(misses))
    assert got.skip_reason[0] == "no scored step follows a miss, so independence cannot be tested"
    assert got.skip_reason[1] == "no scored step follows a miss, so independence cannot be tested"
    assert got.skip_reason[2] == (
        "no scored step follows a covered step, so independence cannot be tested"
    )
    assert got.skip_reason[3] is None and np.isnan(got.lr_ind[:3]).all()
    short = miss_dependence(_batch(np.array([[1]])))
    assert short.skip_reason[0] == "fewer than 2 holdout steps with intervals"
    plain = make_batch(
        [[1.0, 2.0]], [[1.0, 2.0]], holdout_actuals=[[1.0]], holdout_forecasts=[[1.0]]
    )
    assert miss_dependence(plain).skip_reason[0] == "no holdout intervals"


def _fleet(seed: int = 1, n: int = 25, h: int = 12):
    rng = np.random.default_rng(seed)
    misses = (rng.random((n, h)) < rng.uniform(0.02, 0.3, (n, 1))).astype(int)
    level = rng.choice([0.8, 0.9, 0.95], n)
    batch = make_batch(
        np.ones((n, 3)),
        np.ones((n, 3)),
        holdout_actuals=np.where(misses == 1, 2.0, 0.0),
        holdout_forecasts=np.zeros((n, h)),
        holdout_lower=np.full((n, h), -1.0),
        holdout_upper=np.full((n, h), 1.0),
        level=level,
    )
    return batch, misses, level


def test_fleet_coverage_direct_computation():
    batch, misses, level = _fleet()
    w = np.random.default_rng(2).uniform(0.5, 3.0, misses.shape[0])
    got = fleet_coverage(batch, weights=w)
    t = misses.shape[1]
    x = misses.sum(axis=1)
    a = 1 - level
    excess = (w * (x - t * a)).sum() / (w * t).sum()
    np.testing.assert_allclose(got.excess, excess, rtol=RTOL)
    np.testing.assert_allclose(got.miss_rate, (w * x).sum() / (w * t).sum(), rtol=RTOL)
    np.testing.assert_allclose(got.nominal, (w * t * a).sum() / (w * t).sum(), rtol=RTOL)
    # Cluster-robust: statsmodels' WLS of the per-step excess on a constant, clustered by
    # series, CR0 (use_correction=False) times G / (G - 1) (CR1); t with G - 1 df.
    g = misses.shape[0]
    yv = (misses - a[:, None]).ravel()
    groups = np.repeat(np.arange(g), t)
    fit = sm.WLS(yv, np.ones(yv.size), weights=np.repeat(w, t)).fit(
        cov_type="cluster", cov_kwds={"groups": groups, "use_correction": False}
    )
    np.testing.assert_allclose(got.excess, fit.params[0], rtol=RTOL)
    se = fit.bse[0] * np.sqrt(g / (g - 1))
    np.testing.assert_allclose(got.std_error, se, rtol=RTOL)
    np.testing.assert_allclose(got.p_value, 2 * stats.t.sf(abs(excess / se), g - 1), rtol=RTOL)
    q = stats.t.ppf(0.975, g - 1)
    np.testing.assert_allclose(
        [got.ci_low, got.ci_high], [excess - q * se, excess + q * se], rtol=RTOL
    )
    assert got.n_series == g and got.n_steps == g * t and got.df == g - 1


def test_fleet_coverage_equal_weights_and_edge_cases():
    batch, misses, _ = _fleet(3)
    got = fleet_coverage(batch)
    np.testing.assert_allclose(got.miss_rate, misses.mean(), rtol=RTOL)
    one = fleet_coverage(batch.take(np.array([0])))
    assert one.n_series == 1 and np.isnan(one.p_value)
    plain = make_batch(
        [[1.0, 2.0]], [[1.0, 2.0]], holdout_actuals=[[1.0]], holdout_forecasts=[[1.0]]
    )
    assert fleet_coverage(plain).n_series == 0
    with pytest.raises(InputError) as err:
        fleet_coverage(batch, weights=np.ones(3))
    assert err.value.argument == "weights"
