"""Matching a baseline's stored holdout to a new one (service.api.baseline.match): series by
id, periods by timestamp when both sides give them, else by position; what has no
counterpart is NaN and counted, never guessed. The expected arrays are worked out by hand
from the invented inputs below."""

from __future__ import annotations

from datetime import UTC, datetime

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st

from service.api import baseline
from service.api.errors import ApiError
from service.store.records import AssessmentSummary, SeriesInput

NAN = np.nan


def source(*inputs: SeriesInput) -> baseline.Source:
    summary = AssessmentSummary(
        seq=1,
        id="b" * 32,
        created_at=datetime(2026, 11, 30, tzinfo=UTC),
        model="crumb-counts",
        version="2026.11",
        verdict="pass",
        n_series=len(inputs),
        n_failed=0,
        n_warned=0,
        policy_name="default",
        policy_version=1,
    )
    return baseline.Source(requested="2026.11", summary=summary, inputs=list(inputs))


def stored(sid, forecasts, stamps=None, lower=None, upper=None) -> SeriesInput:
    arr = None if forecasts is None else np.array(forecasts, dtype=float)
    return SeriesInput(
        series_id=sid,
        weight=None,
        actuals=np.array([1.0, 2.0]),
        fitted=np.array([1.0, 2.0]),
        holdout_actuals=None if arr is None else np.zeros(arr.size),
        holdout_forecasts=arr,
        holdout_lower=None if lower is None else np.array(lower, dtype=float),
        holdout_upper=None if upper is None else np.array(upper, dtype=float),
        holdout_level=None if lower is None else 0.9,
        holdout_timestamps=stamps,
    )


def test_periods_match_by_timestamp_when_both_sides_have_them():
    src = source(
        stored("a", [10, 11, 12, 13], ["2026-01-05", "2026-01-12", "2026-01-19", "2026-01-26"]),
    )
    # The new holdout starts one week later and runs one week past the baseline's; an offset
    # spelled differently is the same instant.
    new = ["2026-01-12T00:00:00Z", "2026-01-19", "2026-01-26", "2026-02-02"]
    m = baseline.match(src, ["a"], np.array([4]), [new], 5)
    np.testing.assert_array_equal(m.forecasts, [[11, 12, 13, NAN, NAN]])
    assert m.lower is None and m.upper is None
    block = m.block()
    assert block["matched_by"] == {"timestamp": 1, "position": 0}
    assert (block["matched_periods"], block["unmatched_periods"]) == (3, 1)


def test_periods_match_by_position_when_a_side_has_no_timestamps():
    src = source(
        stored("a", [10, 11, 12], lower=[9, 10, 11], upper=[11, 12, 13]),
        stored(
            "b",
            [20, 21, 22, 23, 24],
            ["2026-01-05", "2026-01-12", "2026-01-19", "2026-01-26", "2026-02-02"],
        ),
    )
    lengths = np.array([4, 2])
    m = baseline.match(src, ["a", "b"], lengths, [None, None], 4)
    np.testing.assert_array_equal(m.forecasts, [[10, 11, 12, NAN], [20, 21, NAN, NAN]])
    # Bounds only where the baseline has them.
    np.testing.assert_array_equal(m.lower, [[9, 10, 11, NAN], [NAN] * 4])
    np.testing.assert_array_equal(m.upper, [[11, 12, 13, NAN], [NAN] * 4])
    block = m.block()
    assert block["matched_by"] == {"timestamp": 0, "position": 2}
    assert (block["matched_series"], block["matched_periods"]) == (2, 5)
    assert block["unmatched_periods"] == 1  # series a's fourth step


def test_unmatched_series_on_either_side_are_listed_not_guessed():
    src = source(
        stored("a", [1, 2]),
        stored("gone", [5, 6]),
        stored("no-holdout", None),
        stored("missing-values", [NAN, NAN]),
    )
    ids = ["a", "new", "missing-values", "no-holdout", "train-only"]
    lengths = np.array([2, 2, 2, 2, 0])
    m = baseline.match(src, ids, lengths, [None] * 5, 2)
    np.testing.assert_array_equal(m.forecasts[1:], np.full((4, 2), NAN))
    block = m.block()
    assert block["matched_series"] == 1
    # A new series with a holdout and no baseline value: by id absent, stored without a
    # holdout, or with only missing values; a series without a holdout is not counted.
    assert block["unmatched_series_ids"] == ["new", "missing-values", "no-holdout"]
    assert block["unmatched_series"] == 3
    assert block["baseline_only_series_ids"] == ["gone"]
    assert block["version"] == "2026.11" and block["requested"] == "2026.11"


def test_no_shared_series_is_a_422_naming_the_field():
    src = source(stored("a", [1, 2]))
    with pytest.raises(ApiError) as caught:
        baseline.match(src, ["b"], np.array([2]), [None], 2)
    assert caught.value.status == 422
    assert caught.value.errors[0]["loc"] == "baseline.version"
    assert "shares no series" in caught.value.errors[0]["message"]


def test_listed_ids_are_capped_and_the_counts_whole():
    src = source(stored("a", [1.0]))
    ids = ["a"] + [f"n{i}" for i in range(150)]
    m = baseline.match(src, ids, np.ones(151, dtype=int), [None] * 151, 1)
    block = m.block()
    assert block["unmatched_series"] == 150
    assert len(block["unmatched_series_ids"]) == baseline.MAX_LISTED_IDS


def _daily(n: int, start: int = 0) -> list[str]:
    return [str(np.datetime64("2026-03-02") + np.timedelta64(start + k, "D")) for k in range(n)]


@given(
    new_len=st.integers(1, 15),
    base_len=st.integers(1, 15),
    offset=st.integers(-5, 5),
)
def test_timestamps_agree_with_positions_shifted_by_the_offset(new_len, base_len, offset):
    # The baseline's holdout starts ``offset`` days after the new one's: matching by
    # timestamp gives new step j the baseline's step j - offset, where that step exists.
    values = np.arange(base_len, dtype=float) + 10.0
    src = source(stored("a", values, _daily(base_len, offset)))
    width = new_len + 2
    if not any(0 <= j - offset < base_len for j in range(new_len)):
        with pytest.raises(ApiError):
            baseline.match(src, ["a"], np.array([new_len]), [_daily(new_len)], width)
        return
    m = baseline.match(src, ["a"], np.array([new_len]), [_daily(new_len)], width)
    expected = np.full(width, np.nan)
    for j in range(new_len):
        if 0 <= j - offset < base_len:
            expected[j] = values[j - offset]
    np.testing.assert_array_equal(m.forecasts[0], expected)
    if offset == 0:  # aligned: by position gives the same
        by_position = baseline.match(src, ["a"], np.array([new_len]), [None], width)
        np.testing.assert_array_equal(by_position.forecasts, m.forecasts)
