"""Row rearrangements shared by the residual statistics."""

from __future__ import annotations

import numpy as np
import pytest

from service.core.residual_arrays import (
    align_left,
    as_residuals,
    packed_blocks,
    packed_chunks,
    residual_blocks,
)

from .reference_data import observed, residuals


def test_align_left():
    nan = np.nan
    x = np.array([[nan, 1.0, nan, 2.0, 3.0], [4.0, 5.0, nan, nan, nan]])
    np.testing.assert_array_equal(
        align_left(np.nan_to_num(x), np.array([1, 0])), [[1, 0, 2, 3, 0], [4, 5, 0, 0, 0]]
    )


def _ragged_rows(rng: np.random.Generator) -> list[np.ndarray]:
    # Invented: lengths, late starts and interior gaps of every kind, rows in no order.
    rows = [rng.normal(size=n) for n in (30, 12, 30, 7, 30, 18, 1, 25, 30)]
    rows[1][:3] = np.nan  # a late start
    rows[2][[4, 5, 20]] = np.nan  # gaps
    rows[5][[0, 9]] = np.nan  # a late start and a gap
    rows[8][:2] = np.nan  # the same late start as row 1 ...
    rows[1] = np.r_[rows[1], rng.normal(size=20)]  # ... and the same length
    return rows


@pytest.mark.parametrize("max_elements", [1, 40, 1 << 18])
def test_packed_blocks_hold_each_rows_observed_values_in_order(max_elements):
    rows = _ragged_rows(np.random.default_rng(8))
    res = residuals(rows)
    seen = np.zeros(len(rows), dtype=int)
    for sel, block in residual_blocks(res, max_elements):
        index = np.arange(len(rows))[sel]
        assert block.shape[0] == index.size
        for k, i in enumerate(index):
            # Direct: the observed entries of row i in their order (a boolean mask keeps order).
            np.testing.assert_array_equal(block[k], res.standard[i][res.observed[i]])
            assert block[k].size == observed(rows[i]).size
            seen[i] += 1
    np.testing.assert_array_equal(seen, 1)


def test_packed_chunks_of_alike_rows_are_views():
    x = np.random.default_rng(9).normal(size=(6, 10))
    chunks = list(
        packed_chunks(x, np.full(6, 8), np.full(6, 2), np.ones(6, dtype=bool), max_elements=32)
    )
    assert [c[0] for c in chunks] == [slice(0, 4), slice(4, 6)]
    assert all(np.shares_memory(block, x) for _, block, _ in chunks)
    np.testing.assert_array_equal(np.vstack([b for _, b, _ in chunks]), x[:, 2:])


def test_packed_blocks_need_the_mask_for_gaps():
    x = np.zeros((2, 5))
    with pytest.raises(ValueError):
        list(packed_blocks(x, np.array([3, 4]), np.zeros(2, int), np.array([True, False])))


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
