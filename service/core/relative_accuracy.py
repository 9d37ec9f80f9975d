"""Scale-free holdout accuracy: RMSSE per series and the fleet's average relative MAE."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .batch import SeriesBatch
from .fleet_pooling import PooledMean, pooled_mean
from .holdout import BENCHMARKS, benchmark_forecasts, holdout_pairs, holdout_reason
from .naive_errors import batch_naive_scales
from .results import skip_reasons_and_ran
from .types import FloatMatrix, FloatVector, InputError, IntVector, ObjectVector


@dataclass(frozen=True)
class RelativeMae:
    """An average relative MAE: ``exp`` of a pooled mean log ratio of errors, with the
    interval's ends transformed the same way (Davydenko & Fildes 2013)."""

    estimate: float
    ci_low: float
    ci_high: float
    n_series: int

    @classmethod
    def of(cls, pooled: PooledMean) -> RelativeMae:
        return cls(
            estimate=float(np.exp(pooled.estimate)),
            ci_low=float(np.exp(pooled.ci_low)),
            ci_high=float(np.exp(pooled.ci_high)),
            n_series=pooled.n_series,
        )


def _root_mean_square(x: FloatMatrix, ok: np.ndarray) -> tuple[FloatVector, IntVector]:
    """``sqrt(mean x^2)`` over ``ok`` per row, computed over the row's largest ``|x|`` so squares
    neither overflow nor underflow; and the count."""
    count = ok.sum(axis=1)
    peak = np.where(ok, np.abs(x), 0.0).max(axis=1, initial=0.0)
    peak = np.where(peak > 0, peak, 1.0)
    s = np.where(ok, x, 0.0) / peak[:, None]
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        return np.where(count > 0, peak * np.sqrt((s * s).sum(axis=1) / count), np.nan), count


def error_ratio(model_errors: FloatMatrix, other_errors: FloatMatrix, loss: str) -> FloatVector:
    """Per row, the size of ``model_errors`` over that of ``other_errors`` on the steps where
    both are observed: the ratio of RMSEs for ``loss="squared"``, of MAEs for ``"absolute"``
    (``NaN`` or ``inf`` where undefined). Errors 3, -4 against 1, 1 give ``sqrt(12.5)``
    (squared) and 3.5 (absolute)."""
    both = ~(np.isnan(model_errors) | np.isnan(other_errors))
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        if loss == "squared":
            size = _root_mean_square(model_errors, both)[0]
            return size / _root_mean_square(other_errors, both)[0]
        count = np.maximum(both.sum(axis=1), 1)
        size = np.where(both, np.abs(model_errors), 0.0).sum(axis=1) / count
        return size / (np.where(both, np.abs(other_errors), 0.0).sum(axis=1) / count)


def rmsse_scale(actuals: FloatMatrix, season_length: int = 1) -> FloatVector:
    """In-sample root mean square of the (seasonal) naive forecast's errors,
    ``sqrt(mean_t (y_t - y_{t-m})^2)`` over the pairs with both values observed; ``NaN`` when
    none is. For 18, 13, 16, 11, 17, 14: ``sqrt(104 / 5)`` (``m = 1``) and ``sqrt(4.5)``
    (``m = 2``).
    """
    m = int(season_length)
    if m < 1:
        raise InputError("season_length", f"must be at least 1, got {season_length}")
    a = np.asarray(actuals, dtype=float)
    if a.shape[1] <= m:
        return np.full(a.shape[0], np.nan)
    diff = a[:, m:] - a[:, :-m]
    return _root_mean_square(diff, ~np.isnan(diff))[0]


@dataclass(frozen=True, eq=False)
class ScaledError:
    """RMSSE per series: ``value`` (``NaN`` where skipped), ``rmse`` of the holdout, ``scale``,
    ``horizon`` (scored steps), ``season_length`` and ``skip_reason``."""

    value: FloatVector
    rmse: FloatVector
    scale: FloatVector
    horizon: IntVector
    season_length: int
    skip_reason: ObjectVector


def rmsse(batch: SeriesBatch, *, seasonal: bool = False, min_obs: int = 1) -> ScaledError:
    """Root mean squared scaled error (Makridakis, Spiliotis & Assimakopoulos 2022, IJF
    38:1346-1364, the M5 accuracy measure).

    ``RMSSE = sqrt(mean_h (y_h - f_h)^2 / mean_t (y_t - y_{t-1})^2)``: the holdout RMSE over
    :func:`rmsse_scale` of the training actuals, the in-sample one-step naive forecast's RMS
    error (pairs with both values observed). ``seasonal=True`` scales by the seasonal naive
    (lag ``m`` = the batch's season length) instead. Below 1 the forecasts beat the in-sample
    naive forecast in mean square. M5 computes the scale from the first non-zero demand on;
    here it runs over the whole training period, the rule :func:`~service.core.mase` uses.
    After 18, 13, 16, 11, 17, 14, holdout actuals 15, 19 forecast by 14, 14 score
    ``sqrt(13 / (104 / 5)) = sqrt(0.625)`` (``m = 1``).

    Skipped without a holdout (fewer than ``min_obs`` scored steps), when the training series is
    too short for one difference, or when the scale is 0 (a constant series).
    """
    m = batch.season_length if seasonal else 1
    if m < 1:
        raise InputError("season_length", f"must be at least 1, got {m}")
    scale = batch_naive_scales(batch, m)[1]  # rmsse_scale(batch.actuals, m)
    err, ok, _ = holdout_pairs(batch)
    rmse, count = _root_mean_square(err, ok)
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        value = rmse / scale
    reasons, ran = skip_reasons_and_ran(
        batch.n_series,
        (count < max(min_obs, 1), holdout_reason(min_obs)),
        (np.isnan(scale), f"training series too short for a lag-{m} naive forecast"),
        (scale == 0, "the in-sample naive forecast is exact (constant series), so the scale is 0"),
    )
    return ScaledError(
        value=np.where(ran, value, np.nan),
        rmse=np.where(count > 0, rmse, np.nan),
        scale=scale,
        horizon=count,
        season_length=m,
        skip_reason=reasons,
    )


@dataclass(frozen=True, eq=False)
class RelativeAccuracy:
    """The fleet's average relative MAE with its interval.

    Attributes
    ----------
    estimate : float
        ``AvgRelMAE``: below 1 the model's MAE is smaller than the benchmark's on average.
    ci_low, ci_high : float
        Interval for it, ``exp`` of the interval on the log scale.
    log_ratio : PooledMean
        The weighted mean of the log ratios with its standard error, t statistic (against 0:
        equal accuracy) and p-value.
    n_series : int
        Series used (both MAEs positive and finite).
    log_ratios : ndarray
        ``log(MAE_model_i / MAE_bench_i)`` per series, ``NaN`` where not used.
    weights : ndarray of int
        ``n_i``, the holdout steps with both errors, per series.
    """

    estimate: float
    ci_low: float
    ci_high: float
    log_ratio: PooledMean
    n_series: int
    log_ratios: FloatVector
    weights: IntVector


def avg_rel_mae(
    model_errors: FloatMatrix, bench_errors: FloatMatrix, *, level: float = 0.95
) -> RelativeAccuracy:
    """Average relative MAE over the fleet (Davydenko & Fildes 2013, IJF 29:510-522).

    ``AvgRelMAE = exp(sum_i n_i log(MAE_model_i / MAE_bench_i) / sum_i n_i)``, the weighted
    geometric mean of the series' relative MAEs, over the series with both MAEs positive and
    finite; ``n_i`` is series ``i``'s number of holdout steps with both errors observed, and
    each MAE is taken over those steps. It is unchanged when a series is rescaled, and
    swapping model and benchmark inverts it.

    The interval is ``exp`` of the t interval of the weighted mean log ratio,
    :func:`~service.core.fleet_pooling.pooled_mean` with weights ``n_i`` (HC1 variance over
    series, ``G - 1`` degrees of freedom): a choice, with series taken as independent; the
    log scale is the paper's. Log ratios ``log 2, log 0.5, log 1`` with ``n_i = 1, 1, 2``
    give ``AvgRelMAE = 1``.
    """
    e1 = np.asarray(model_errors, dtype=float)
    e2 = np.asarray(bench_errors, dtype=float)
    if e1.shape != e2.shape:
        raise InputError("bench_errors", f"shape {e2.shape} does not match {e1.shape}")
    ok = ~(np.isnan(e1) | np.isnan(e2))
    n = ok.sum(axis=1)
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        # Each row over its largest |error| first: sums of huge errors stay finite.
        peak = np.where(ok, np.maximum(np.abs(e1), np.abs(e2)), 0.0).max(axis=1, initial=0.0)
        peak = np.where(peak > 0, peak, 1.0)[:, None]
        mae1 = np.where(ok, np.abs(e1) / peak, 0.0).sum(axis=1) / n
        mae2 = np.where(ok, np.abs(e2) / peak, 0.0).sum(axis=1) / n
        ratio = np.log(mae1) - np.log(mae2)
    use = (n > 0) & (mae1 > 0) & (mae2 > 0) & np.isfinite(ratio)
    log_ratios = np.where(use, ratio, np.nan)
    pooled = pooled_mean(log_ratios, np.where(use, n, 0).astype(float), level=level)
    return RelativeAccuracy(
        estimate=float(np.exp(pooled.estimate)),
        ci_low=float(np.exp(pooled.ci_low)),
        ci_high=float(np.exp(pooled.ci_high)),
        log_ratio=pooled,
        n_series=pooled.n_series,
        log_ratios=log_ratios,
        weights=n,
    )


def fleet_avg_rel_mae(
    batch: SeriesBatch, *, benchmark: str = "naive", level: float = 0.95
) -> RelativeAccuracy:
    """:func:`avg_rel_mae` of the holdout forecasts against one benchmark of
    :func:`~service.core.holdout.benchmark_forecasts` (default the naive forecast) fitted
    to the training actuals."""
    names = [k for k in BENCHMARKS if k != "seasonal_naive" or batch.season_length > 1]
    if benchmark not in names:
        raise InputError("benchmark", f"unknown or unavailable benchmark {benchmark!r}")
    err, _, _ = holdout_pairs(batch)
    width = err.shape[1]
    if batch.holdout is None or width == 0:
        empty = np.full((batch.n_series, 0), np.nan)
        return avg_rel_mae(empty, empty, level=level)
    bench = batch.holdout.actuals - benchmark_forecasts(batch, width)[benchmark]
    return avg_rel_mae(err, bench, level=level)
