"""Benjamini-Hochberg adjustment against the paper's worked example and scipy."""

from __future__ import annotations

import numpy as np
from hypothesis import given
from hypothesis import strategies as st
from scipy import stats

from service.core import benjamini_hochberg

# references.md: Benjamini & Hochberg (1995), the paper's worked example (15 p-values).
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
# references.md: the adjusted p-values of the same example.
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


def test_worked_example_adjusted_values():
    np.testing.assert_allclose(benjamini_hochberg(BH_P), BH_ADJ, rtol=1e-6)


def test_worked_example_rejections_at_fdr_005():
    # references.md: at FDR 0.05 BH rejects 4 (Bonferroni 3).
    assert (benjamini_hochberg(BH_P) <= 0.05).sum() == 4
    assert (BH_P * BH_P.size <= 0.05).sum() == 3


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
