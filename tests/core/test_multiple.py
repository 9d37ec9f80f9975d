"""Benjamini-Hochberg adjusted p-values against the paper's worked example, scipy and
statsmodels."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats
from statsmodels.stats.multitest import multipletests

from service.core import InputError, benjamini_hochberg

RTOL = 1e-8

# references.md: Benjamini & Hochberg (1995) worked example, 15 p-values.
BH_P = np.array(
    [
        0.0001,
        0.0004,
        0.0019,
        0.0095,
        0.0201,
        0.0278,
        0.0298,
        0.0344,
        0.0459,
        0.3240,
        0.4262,
        0.5719,
        0.6528,
        0.7590,
        1.000,
    ]
)
# references.md: adjusted p-values for the example (printed to 8 significant digits).
BH_ADJ = np.array(
    [
        0.0015,
        0.003,
        0.0095,
        0.035625,
        0.0603,
        0.06385714,
        0.06385714,
        0.0645,
        0.0765,
        0.486,
        0.58118182,
        0.714875,
        0.75323077,
        0.81321429,
        1.0,
    ]
)


def test_worked_example():
    adj = benjamini_hochberg(BH_P)
    np.testing.assert_allclose(adj, BH_ADJ, rtol=1e-7)
    # references.md: at FDR 0.05 BH rejects 4, Bonferroni 3.
    assert (adj <= 0.05).sum() == 4
    assert (BH_P * BH_P.size <= 0.05).sum() == 3


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
