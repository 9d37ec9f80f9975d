"""The in-sample (seasonal) naive forecast's error scales, shared by MASE and RMSSE."""

from __future__ import annotations

import numpy as np

from .batch import SeriesBatch
from .types import FloatMatrix, FloatVector


def naive_error_scales(actuals: FloatMatrix, season_length: int) -> tuple[FloatVector, FloatVector]:
    """``(mean |d|, sqrt(mean d^2))`` per row of ``d_t = y_t - y_{t-m}`` over the pairs with
    both values observed (``NaN`` where none is): the scales of MASE (Hyndman & Koehler 2006)
    and RMSSE (the M5 competition's). The root mean square is taken over the row's largest
    ``|d|``, so squares neither overflow nor underflow. One pass over the differences for
    both."""
    m = int(season_length)
    n, width = actuals.shape
    if width <= m:
        nan = np.full(n, np.nan)
        return nan, nan.copy()
    d = actuals[:, m:] - actuals[:, :-m]
    missing = np.isnan(d)
    np.abs(d, out=d)
    d[missing] = 0.0
    count = d.shape[1] - missing.sum(axis=1)
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        mae = np.where(count > 0, d.sum(axis=1) / count, np.nan)
        peak = d.max(axis=1, initial=0.0)
        peak = np.where(peak > 0, peak, 1.0)
        np.divide(d, peak[:, None], out=d)
        np.multiply(d, d, out=d)
        rms = np.where(count > 0, peak * np.sqrt(d.sum(axis=1) / count), np.nan)
    return mae, rms


def batch_naive_scales(batch: SeriesBatch, season_length: int) -> tuple[FloatVector, FloatVector]:
    """:func:`naive_error_scales` of the batch's training actuals, computed once per batch and
    lag (the batch is immutable)."""
    key = f"_naive_scales_{int(season_length)}"
    found = batch.__dict__.get(key)
    if found is None:
        found = naive_error_scales(batch.actuals, season_length)
        batch.__dict__[key] = found
    return found
