"""What each chart of a series shows, computed with the statistics core (no plotting here).

The numbers come from the same functions the gate used, on a batch of this one series, so a
chart never disagrees with the check it illustrates.
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import date, datetime
from typing import Any

import numpy as np

from service.core import (
    InputError,
    autocorrelations,
    benchmark_forecasts,
    benchmark_skill,
    make_batch,
    portmanteau_lags,
    residuals_of,
)
from service.core.types import FloatMatrix, FloatVector
from service.results import SeriesResult

from .inputs import ReportInputError, SeriesInputs

ACF_MIN_LAGS = 20
"""The ACF chart shows at least this many lags (fewer when the series is shorter)."""
ACF_Z = 1.96
"""Two-sided 95% normal quantile for the approximate white-noise bounds +-1.96/sqrt(T)."""
HOLDOUT_CONTEXT = 3
"""The holdout chart shows this many horizons of training periods before it (at least 24)."""


@dataclass(frozen=True, eq=False)
class TimeAxis:
    """Positions of the training and holdout periods: dates where the timestamps are ISO
    dates, else period numbers 1..T, T+1..T+H."""

    train: np.ndarray
    holdout: np.ndarray
    is_date: bool
    label: str


@dataclass(frozen=True, eq=False)
class HoldoutView:
    actuals: FloatVector
    forecasts: FloatVector
    lower: FloatVector | None
    upper: FloatVector | None
    level: float | None
    benchmark: str | None
    benchmark_forecasts: FloatVector | None
    context_start: int
    baseline_forecasts: FloatVector | None = None
    baseline_label: str | None = None
    """Index of the first training period drawn before the holdout."""


@dataclass(frozen=True, eq=False)
class SeriesDiagnostics:
    series_id: str
    axis: TimeAxis
    actuals: FloatVector
    fitted: FloatVector
    residuals: FloatVector
    n_obs: int
    mean: float
    std: float
    """Population standard deviation of the observed residuals (the normal's MLE)."""
    acf: FloatVector
    """``r_1..r_K`` (``K`` = ``len(acf)``)."""
    acf_bound: float
    """``1.96 / sqrt(n_obs)``."""
    ljung_box_lags: int | None
    tracking_window: int | None
    holdout: HoldoutView | None


def _parse_stamp(text: str) -> datetime | None:
    try:
        return datetime.fromisoformat(text.replace("Z", "+00:00"))
    except ValueError:
        try:
            d = date.fromisoformat(text)
        except ValueError:
            return None
        return datetime(d.year, d.month, d.day)


def _dates(stamps: tuple[str, ...] | list[str]) -> np.ndarray | None:
    """Increasing ISO timestamps as ``datetime64[s]``, else ``None``."""
    parsed = [_parse_stamp(str(s)) for s in stamps]
    if any(p is None for p in parsed):
        return None
    # Mixed naive/aware stamps cannot be ordered; drop the zone (the axis shows local dates).
    out = np.array([p.replace(tzinfo=None) for p in parsed], dtype="datetime64[s]")  # type: ignore[union-attr]
    if out.size > 1 and (np.diff(out) <= np.timedelta64(0, "s")).any():
        return None
    return out


def time_axis(
    timestamps: tuple[str, ...] | None,
    length: int,
    horizon: int,
    holdout_timestamps: tuple[str, ...] | None = None,
) -> TimeAxis:
    """Dates from ISO timestamps, else period numbers. Without holdout timestamps the holdout
    continues at the median spacing of the training timestamps."""
    numbers = TimeAxis(
        train=np.arange(1, length + 1, dtype=float),
        holdout=np.arange(length + 1, length + horizon + 1, dtype=float),
        is_date=False,
        label="Period",
    )
    if not timestamps or len(timestamps) != length:
        return numbers
    train = _dates(timestamps)
    if train is None:
        return numbers
    given = None
    if holdout_timestamps and len(holdout_timestamps) == horizon:
        given = _dates(holdout_timestamps)
        if given is not None and given.size and given[0] <= train[-1]:
            given = None
    if given is not None:
        holdout = given
    else:
        steps = np.diff(train).astype(np.int64)
        step = int(np.median(steps)) if steps.size else 86400
        holdout = train[-1] + (np.arange(1, horizon + 1) * step).astype("timedelta64[s]")
    return TimeAxis(train=train, holdout=holdout, is_date=True, label="Date")


def _detail(series_result: SeriesResult | None, check: str, key: str) -> Any:
    """Detail ``key`` of check ``check`` in the stored series result, if it reports it."""
    entry = None if series_result is None else series_result.check(check)
    return None if entry is None else entry.details.get(key)


def _one_row(values: FloatVector | None) -> FloatMatrix | None:
    """One series as a batch of one row (the layout :func:`make_batch` takes)."""
    return None if values is None else values[np.newaxis, :]


def series_diagnostics(
    inputs: SeriesInputs,
    series_result: SeriesResult | None = None,
    *,
    season_length: int = 1,
    model_params: int = 0,
) -> SeriesDiagnostics:
    """Compute every quantity the series charts draw.

    ``series_result`` is the series' entry of the stored assessment: where it reports the
    Ljung-Box lags, the tracking-signal window or the best benchmark, the charts use those;
    otherwise the core's default rules give them.
    """
    hold = inputs.has_holdout
    try:
        batch = make_batch(
            inputs.actuals[np.newaxis, :],
            inputs.fitted[np.newaxis, :],
            ids=[inputs.series_id],
            season_length=int(season_length),
            model_params=int(model_params),
            holdout_actuals=_one_row(inputs.holdout_actuals) if hold else None,
            holdout_forecasts=_one_row(inputs.holdout_forecasts) if hold else None,
            holdout_lower=_one_row(inputs.holdout_lower) if inputs.has_interval else None,
            holdout_upper=_one_row(inputs.holdout_upper) if inputs.has_interval else None,
            level=inputs.level if inputs.has_interval else None,
            lengths=[inputs.actuals.size],
            burn_in=int(inputs.burn_in),
        )
    except InputError as exc:
        raise ReportInputError(exc.argument, exc.message) from exc
    res = residuals_of(batch)
    e = res.values[0]
    n_obs = int(res.n_obs[0])
    observed = e[res.observed[0]]
    mean = float(observed.mean()) if n_obs else float("nan")
    std = float(observed.std()) if n_obs else float("nan")

    # The last short lag (lags 1..L are tested: lag 1 by the lag-1 regression, the rest by the
    # portmanteau); a result stored before the detail existed carries only "lags" (1..lags).
    lb_lags = _detail(series_result, "ljung_box", "short_last_lag")
    if lb_lags is None:
        lb_lags = _detail(series_result, "ljung_box", "lags")
    if lb_lags is None:
        lb_lags = int(portmanteau_lags(res.n_obs, batch.season_length)[0])
    lb_lags = int(lb_lags) if lb_lags and lb_lags > 0 else None
    window = _detail(series_result, "tracking_signal", "window")
    window = int(window) if window else None

    max_lag = min(max(n_obs - 1, 0), max(ACF_MIN_LAGS, (lb_lags or 0) + 4))
    if max_lag >= 1 and not res.constant[0]:
        acf = autocorrelations(res, max_lag)[0]
    else:
        acf = np.zeros(0)
    bound = ACF_Z / np.sqrt(n_obs) if n_obs else float("nan")

    horizon = inputs.holdout_actuals.size if hold else 0  # type: ignore[union-attr]
    axis = time_axis(inputs.timestamps, inputs.actuals.size, horizon, inputs.holdout_timestamps)
    view = None
    if hold:
        best = _detail(series_result, "benchmark_skill", "best_benchmark")
        if best is None:
            best = benchmark_skill(batch).details["best_benchmark"][0]
        bench = None
        if best is not None:
            bench = benchmark_forecasts(batch, horizon).get(str(best))
        span = max(HOLDOUT_CONTEXT * horizon, 24)
        view = HoldoutView(
            actuals=batch.holdout.actuals[0],  # type: ignore[union-attr]
            forecasts=batch.holdout.forecasts[0],  # type: ignore[union-attr]
            lower=None if not inputs.has_interval else batch.holdout.lower[0],  # type: ignore[union-attr,index]
            upper=None if not inputs.has_interval else batch.holdout.upper[0],  # type: ignore[union-attr,index]
            level=float(batch.holdout.level[0]) if inputs.has_interval else None,  # type: ignore[union-attr,index]
            benchmark=None if bench is None else str(best),
            benchmark_forecasts=None if bench is None else bench[0],
            context_start=max(int(batch.lengths[0]) - span, 0),
            baseline_forecasts=inputs.baseline_forecasts,
            baseline_label=inputs.baseline_label,
        )
    return SeriesDiagnostics(
        series_id=inputs.series_id,
        axis=axis,
        actuals=batch.actuals[0],
        fitted=batch.fitted[0],
        residuals=e,
        n_obs=n_obs,
        mean=mean,
        std=std,
        acf=acf,
        acf_bound=float(bound),
        ljung_box_lags=lb_lags,
        tracking_window=window,
        holdout=view,
    )
