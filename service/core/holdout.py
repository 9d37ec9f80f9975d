"""The holdout part of a batch and the simple benchmarks fitted to the training actuals.

Shared by the holdout checks (accuracy, benchmarks, intervals, holdout bias) and the forecast
comparisons. The benchmarks are the four methods of the forecaster's toolbox, each forecasting
``h = 1..H`` steps past the end of the training period:

* ``mean``: the mean of the observed training actuals;
* ``naive``: ``y_T``, the last observed actual (the training period may end in a gap);
* ``seasonal_naive``: the value one season earlier, ``y_{T - m + 1 + (h - 1) mod m}`` (only when
  ``m > 1``; where that value is missing, the same season's most recent observed value);
* ``drift``: the line through the first and last observed actuals, extended to each step.
"""

from __future__ import annotations

import numpy as np

from .batch import SeriesBatch
from .types import FloatMatrix

BENCHMARKS = ("mean", "naive", "seasonal_naive", "drift")


def benchmark_forecasts(batch: SeriesBatch, horizon: int) -> dict[str, FloatMatrix]:
    """Forecasts of each benchmark, shape ``(n_series, horizon)``; ``NaN`` where undefined.

    ``seasonal_naive`` is left out when the season length is 1 (it equals ``naive``).
    """
    a = batch.actuals
    n, width = a.shape
    m = batch.season_length
    if width == 0:
        # No training period at all: every benchmark is undefined.
        names = [k for k in BENCHMARKS if k != "seasonal_naive" or m > 1]
        return {k: np.full((n, horizon), np.nan) for k in names}
    length = batch.lengths
    rows = np.arange(n)
    observed = ~np.isnan(a)
    has = observed.any(axis=1)
    # The last observed actual, which may sit before the end of the training period.
    last_idx = np.where(has, width - 1 - np.argmax(observed[:, ::-1], axis=1), 0)
    first_idx = np.argmax(observed, axis=1)
    h = np.arange(1, horizon + 1)[None, :]
    # Steps from the last observed actual to each holdout step.
    ahead = h + (length - 1 - last_idx)[:, None]
    count = observed.sum(axis=1)
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        mean = np.where(count > 0, np.where(observed, a, 0.0).sum(axis=1) / count, np.nan)
    y_last = np.where(has, a[rows, last_idx], np.nan)
    y_first = np.where(has, a[rows, first_idx], np.nan)
    span = (last_idx - first_idx).astype(float)
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        slope = np.where(span > 0, (y_last - y_first) / span, np.nan)
    out = {
        "mean": np.repeat(mean[:, None], horizon, axis=1),
        "naive": np.repeat(y_last[:, None], horizon, axis=1),
        "drift": y_last[:, None] + ahead * slope[:, None],
    }
    if m > 1:
        # Source index one season back, then further back by whole seasons where missing.
        src = (length[:, None] - m + (h - 1) % m).astype(np.int64)
        values = np.full((n, horizon), np.nan)
        # Enough steps back to reach index 0 from the furthest source: (width - 1) // m + 1.
        for _ in range((width - 1) // m + 1):
            inside = src >= 0
            got = np.where(inside, a[rows[:, None], np.clip(src, 0, max(width - 1, 0))], np.nan)
            values = np.where(np.isnan(values), got, values)
            src = src - m
            if not np.isnan(values).any() or not inside.any():
                break
        out["seasonal_naive"] = values
    return {k: out[k] for k in BENCHMARKS if k in out}


def holdout_pairs(batch: SeriesBatch) -> tuple[FloatMatrix, np.ndarray, np.ndarray]:
    """Holdout errors ``actual - forecast`` (NaN where either is missing), their mask and
    count per series. Empty (zero-width) when the batch has no holdout."""
    if batch.holdout is None:
        empty = np.zeros((batch.n_series, 0))
        return empty, empty.astype(bool), np.zeros(batch.n_series, dtype=np.int64)
    err = batch.holdout.actuals - batch.holdout.forecasts
    ok = ~np.isnan(err)
    return err, ok, ok.sum(axis=1)


def holdout_reason(min_obs: int) -> str:
    """Skip reason for a series with fewer scored holdout steps than ``min_obs``."""
    return "no holdout" if min_obs <= 1 else f"fewer than {min_obs} holdout steps"
