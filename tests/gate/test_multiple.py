"""Benjamini-Hochberg adjustment against the paper's worked example and scipy."""

from __future__ import annotations

import numpy as np
from hypothesis import given
from hypothesis import strategies as st
from scipy import stats

from service.core import benjamini_hochberg
from tests.reference_values import (
    BH_EXAMPLE_ADJUSTED,
    BH_EXAMPLE_P,
    BH_EXAMPLE_REJECTED_AT_005,
    BONFERRONI_EXAMPLE_REJECTED_AT_005,
)

# tests/reference_values.py BH_EXAMPLE_P: Benjamini & Hochberg (1995), the paper's worked
# example (15 p-values); BH_EXAMPLE_ADJUSTED: its adjusted p-values (computed, 8 significant
# digits).
BH_P = BH_EXAMPLE_P
BH_ADJ = BH_EXAMPLE_ADJUSTED


def test_worked_example_adjusted_values():
    np.testing.assert_allclose(benjamini_hochberg(BH_P), BH_ADJ, rtol=1e-6)


def test_worked_example_rejections_at_fdr_005():
    # tests/reference_values.py BH_EXAMPLE_REJECTED_AT_005, BONFERRONI_EXAMPLE_REJECTED_AT_005:
    # Benjamini & Hochberg (1995), at FDR 0.05 BH rejects 4 and Bonferroni 3.
    assert (benjamini_hochberg(BH_P) <= 0.05).sum() == BH_EXAMPLE_REJECTED_AT_005
    assert (BH_P * BH_P.size <= 0.05).sum() == BONFERRONI_EXAMPLE_REJECTED_AT_005


@given(st.lists(st.floats(0, 1), min_size=1, max_size=60), st.randoms())
def test_matches_scipy_false_discovery_control(ps, rnd):
    p = np.array(ps)
    np.testing.assert_allclose(
        benjamini_hochberg(p), stats.false_discovery_control(p, method="bh"), rtol=1e-12
    )
    # NaN (skipped series) are left out and kept in place.
    with_nan = p.copy()
    hole = rnd.randrange(p.size)
    with_nan[hole] = np.nan
    adj = benjamini_hochberg(with_nan)
    assert np.isnan(adj[hole])
    keep = ~np.isnan(with_nan)
    np.testing.assert_allclose(
        adj[keep], stats.false_discovery_control(with_nan[keep], method="bh"), rtol=1e-12
    )


def test_all_missing_gives_all_missing():
    assert np.isnan(benjamini_hochberg(np.array([np.nan, np.nan]))).all()
