"""Benjamini-Hochberg adjusted p-values against the paper's worked example, scipy and
statsmodels."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats
from statsmodels.stats.multitest import multipletests

from service.core import InputError, benjamini_hochberg
from tests.reference_values import (
    BH_EXAMPLE_ADJUSTED,
    BH_EXAMPLE_P,
    BH_EXAMPLE_REJECTED_AT_005,
    BONFERRONI_EXAMPLE_REJECTED_AT_005,
)

RTOL = 1e-8

# tests/reference_values.py BH_EXAMPLE_P: Benjamini & Hochberg (1995), the paper's worked
# example (15 p-values); BH_EXAMPLE_ADJUSTED: its adjusted p-values (computed, 8 significant
# digits).
BH_P = BH_EXAMPLE_P
BH_ADJ = BH_EXAMPLE_ADJUSTED


def test_worked_example():
    adj = benjamini_hochberg(BH_P)
    np.testing.assert_allclose(adj, BH_ADJ, rtol=1e-7)
    # tests/reference_values.py BH_EXAMPLE_REJECTED_AT_005, BONFERRONI_EXAMPLE_REJECTED_AT_005:
    # Benjamini & Hochberg (1995), at FDR 0.05 BH rejects 4 and Bonferroni 3.
    assert (adj <= 0.05).sum() == BH_EXAMPLE_REJECTED_AT_005
    assert (BH_P * BH_P.size <= 0.05).sum() == BONFERRONI_EXAMPLE_REJECTED_AT_005


def test_order_does_not_matter():
    perm = np.random.default_rng(0).permutation(BH_P.size)
    np.testing.assert_array_equal(benjamini_hochberg(BH_P[perm]), benjamini_hochberg(BH_P)[perm])


@pytest.mark.parametrize("seed", range(5))
def test_matches_scipy_and_statsmodels(seed):
    rng = np.random.default_rng(seed)
    p = np.concatenate([rng.uniform(0, 1, 80), rng.uniform(0, 0.01, 20)])
    p[rng.choice(100, 5, replace=False)] = p[0]  # ties
    ours = benjamini_hochberg(p)
    np.testing.assert_allclose(ours, stats.false_discovery_control(p, method="bh"), rtol=RTOL)
    reject, adj, _, _ = multipletests(p, alpha=0.1, method="fdr_bh")
    np.testing.assert_allclose(ours, adj, rtol=RTOL)
    np.testing.assert_array_equal(ours <= 0.1, reject)


def test_missing_p_values_are_left_out_and_kept():
    p = np.array([0.01, np.nan, 0.04, 0.03, np.nan])
    ours = benjamini_hochberg(p)
    assert np.isnan(ours[[1, 4]]).all()
    have = ~np.isnan(p)
    np.testing.assert_allclose(ours[have], stats.false_discovery_control(p[have]), rtol=RTOL)
    assert np.isnan(benjamini_hochberg(np.array([np.nan, np.nan]))).all()
    assert benjamini_hochberg(np.array([])).shape == (0,)


def test_bad_p_values_name_the_argument():
    for bad in (np.array([0.1, 1.2]), np.array([-0.1]), np.array([[0.1, 0.2]])):
        with pytest.raises(InputError) as err:
            benjamini_hochberg(bad)
        assert err.value.argument == "p_values"
