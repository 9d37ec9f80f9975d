"""Holdout accuracy: MASE, scaled by the in-sample (seasonal) naive forecast's error."""

from __future__ import annotations

import numpy as np

from ..batch import SeriesBatch
from ..holdout import holdout_pairs, holdout_reason
from ..naive_errors import batch_naive_scales
from ..registry import CheckDef, CheckPolicy, Finding, Option, fmt
from ..relative_accuracy import rmsse
from ..results import CheckResult, is_none, skip_reasons_and_ran
from ..types import FloatMatrix, FloatVector, InputError


def naive_scale(actuals: FloatMatrix, season_length: int = 1) -> FloatVector:
    """In-sample MAE of the naive (``m = 1``) or seasonal naive (lag ``m``) forecast.

    ``scale = mean |y_t - y_{t-m}|`` over the pairs with both values observed (Hyndman &
    Koehler 2006). For 18, 13, 16, 11, 17, 14 it is 4.4 (``m = 1``) and 2.0 (``m = 2``).
    ``NaN`` when no pair is observed.
    """
    m = int(season_length)
    if m < 1:
        raise InputError("season_length", f"must be at least 1, got {season_length}")
    if actuals.shape[1] <= m:
        return np.full(actuals.shape[0], np.nan)
    diff = np.abs(actuals[:, m:] - actuals[:, :-m])
    count = (~np.isnan(diff)).sum(axis=1)
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        return np.where(count > 0, np.where(np.isnan(diff), 0.0, diff).sum(axis=1) / count, np.nan)


def mase(batch: SeriesBatch, *, min_obs: int = 1) -> CheckResult:
    """Mean absolute scaled error of the holdout forecasts (Hyndman & Koehler 2006).

    ``MASE = mean |y_h - yhat_h| / scale`` with ``scale`` from :func:`naive_scale` on the
    training actuals with the batch's season length. Below 1 the forecasts beat the in-sample
    one-step (seasonal) naive forecast on average. Holdout actuals 15, 19 with forecasts 14, 14
    after the training series above give 0.681818 (``m = 1``) and 1.5 (``m = 2``).

    Skipped without a holdout (fewer than ``min_obs`` scored steps), when the training series is
    too short for one (seasonal) difference, or when the scale is zero (a constant series).
    """
    m = batch.season_length
    scale = batch_naive_scales(batch, m)[0]  # naive_scale(batch.actuals, m)
    err, ok, count = holdout_pairs(batch)
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        mae = np.where(count > 0, np.where(ok, np.abs(err), 0.0).sum(axis=1) / count, np.nan)
        value = mae / scale
    reasons, ran = skip_reasons_and_ran(
        batch.n_series,
        (count < max(min_obs, 1), holdout_reason(min_obs)),
        (np.isnan(scale), f"training series too short for a lag-{m} naive forecast"),
        (scale == 0, "the in-sample naive forecast is exact (constant series), so the scale is 0"),
    )
    return CheckResult(
        name="mase",
        kind="metric",
        statistic=np.where(ran, value, np.nan),
        p_value=np.full(batch.n_series, np.nan),
        details={
            "scale": np.where(np.isfinite(scale), scale, np.nan),
            "mae": np.where(ran, mae, np.nan),
            "horizon": count,
            "season_length": np.full(batch.n_series, m),
        },
        skip_reason=reasons,
    )


def rmsse_check(batch: SeriesBatch, *, min_obs: int = 1) -> CheckResult:
    """Root mean squared scaled error of the holdout forecasts (the M5 competition's measure:
    Makridakis, Spiliotis & Assimakopoulos 2022, IJF 38:1346-1364).

    ``RMSSE = sqrt(mean_h (y_h - yhat_h)^2 / mean_t (y_t - y_{t-1})^2)``: the holdout RMSE over
    the in-sample one-step naive RMS error (:func:`service.core.relative_accuracy.rmsse`; the
    scale over the whole training period, pairs with both values observed). Skipped without a
    holdout, when the training series is too short for one difference, or when the scale is 0.
    """
    found = rmsse(batch, min_obs=min_obs)
    ran = is_none(found.skip_reason)
    return CheckResult(
        name="rmsse",
        kind="metric",
        statistic=np.where(ran, found.value, np.nan),
        p_value=np.full(batch.n_series, np.nan),
        details={
            "scale": np.where(np.isfinite(found.scale), found.scale, np.nan),
            "rmse": np.where(ran, found.rmse, np.nan),
            "horizon": found.horizon,
        },
        skip_reason=found.skip_reason,
    )


# ------------------------------------------------------------------------------- declarations


def _mase_found(f: Finding) -> str:
    seasonal = "seasonal " if int(f.detail("season_length")) > 1 else ""
    return (
        f"holdout MASE is {fmt(f.statistic)} over {int(f.detail('horizon'))} steps: the "
        f"holdout MAE {fmt(float(f.detail('mae')), 4)} is {fmt(f.statistic, 2)} times the "
        f"in-sample {seasonal}naive MAE {fmt(float(f.detail('scale')), 4)}"
    )


def _rmsse_found(f: Finding) -> str:
    return (
        f"holdout RMSSE is {fmt(f.statistic)} over {int(f.detail('horizon'))} steps: the "
        f"holdout RMSE {fmt(float(f.detail('rmse')), 4)} is {fmt(f.statistic, 2)} times the "
        f"in-sample one-step naive RMS error {fmt(float(f.detail('scale')), 4)}"
    )


_INFORMATIONAL = (
    "informational by default: a correct model's multi-step holdout error, scaled by an "
    "in-sample one-step error, grows with the horizon and with the series' own dynamics, so "
    "no fixed bound separates correct from flawed models; benchmark_skill tests accuracy"
)

CHECKS = (
    CheckDef(
        name="mase",
        title="MASE",
        kind="metric",
        position=70,
        family="accuracy",
        needs_holdout=True,
        tests="holdout MAE scaled by the in-sample (seasonal) naive MAE",
        null_hypothesis="",
        defaults="scale from lag-m differences of the training actuals; " + _INFORMATIONAL,
        details=("scale", "mae", "horizon", "season_length"),
        source="Hyndman & Koehler (2006), IJF 22:679-688",
        run=lambda inputs, **options: mase(inputs.batch, **options),
        # The headline scale-free error, reported; a policy may set warn_above / fail_above.
        rule=CheckPolicy(warn_share=0.25, fail_share=0.10),
        passed="holdout accuracy reported (MASE)",
        found=_mase_found,
        meaning="the forecasts are less accurate than the policy allows",
        options=(Option("min_obs"),),
        thresholds=("warn_above", "fail_above"),
    ),
    CheckDef(
        name="rmsse",
        title="RMSSE",
        kind="metric",
        position=72,
        family="accuracy",
        needs_holdout=True,
        tests="holdout RMSE scaled by the in-sample one-step naive RMS error (M5)",
        null_hypothesis="",
        defaults="scale from lag-1 differences of the training actuals; " + _INFORMATIONAL,
        details=("scale", "rmse", "horizon"),
        source="Makridakis, Spiliotis & Assimakopoulos (2022), IJF 38:1346-1364",
        run=lambda inputs, **options: rmsse_check(inputs.batch, **options),
        rule=CheckPolicy(warn_share=0.25, fail_share=0.10),
        passed="holdout accuracy reported (RMSSE)",
        found=_rmsse_found,
        meaning="the forecasts are less accurate than the policy allows",
        options=(Option("min_obs"),),
        thresholds=("warn_above", "fail_above"),
    ),
)
