"""Row rearrangements shared by the residual statistics."""

from __future__ import annotations

import numpy as np

from service.core.residual_arrays import align_left, as_residuals, pack_observed, rank_from_end

from .reference_data import residuals


def test_pack_align_and_rank():
    nan = np.nan
    x = np.array([[nan, 1.0, nan, 2.0, 3.0], [4.0, 5.0, nan, nan, nan]])
    observed = ~np.isnan(x)
    np.testing.assert_array_equal(
        pack_observed(np.where(observed, x, 0.0), observed), [[1, 2, 3, 0, 0], [4, 5, 0, 0, 0]]
    )
    np.testing.assert_array_equal(
        align_left(np.nan_to_num(x), np.array([1, 0])), [[1, 0, 2, 3, 0], [4, 5, 0, 0, 0]]
    )
    np.testing.assert_array_equal(rank_from_end(observed), [[3, 3, 2, 2, 1], [2, 1, 0, 0, 0]])


def test_as_residuals_of_a_matrix_follows_the_batch_rules():
    x = np.array([[np.nan, 1.0, np.nan, 2.0, 4.0], [4.0, 5.0, np.nan, np.nan, np.nan]])
    res = as_residuals(x)
    ref = residuals([[np.nan, 1.0, np.nan, 2.0, 4.0], [4.0, 5.0]])
    np.testing.assert_array_equal(res.n_obs, [3, 2])
    np.testing.assert_array_equal(res.start, ref.start)
    np.testing.assert_array_equal(res.lengths, ref.lengths)
    np.testing.assert_allclose(res.mean, [7 / 3, 4.5])
    assert as_residuals(res) is res


def test_each_row_is_computed_alone():
    # Stacking a batch on itself (as the service stacks submissions) changes no row's result.
    from service.core.burn_in import burn_in_hint
    from service.core.ewc import ewc_bias

    rng = np.random.default_rng(21)
    x = rng.normal(size=(5, 60))
    x[1, 50:] = np.nan
    x[2, [4, 30]] = np.nan
    for fn in (ewc_bias, burn_in_hint):
        alone = fn(x)
        stacked = fn(np.vstack([x, x]))
        np.testing.assert_array_equal(stacked.statistic[:5], alone.statistic)
        np.testing.assert_array_equal(stacked.statistic[5:], alone.statistic)
