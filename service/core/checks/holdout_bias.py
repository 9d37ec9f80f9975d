"""Holdout bias: do the forecasts run high or low over the holdout, per series and across the
fleet?

A bias that shows only out of sample (the in-sample fit is fine, the forecasts drift) is named
as such. The per-series test on one forecast path is weak evidence (errors along a path are
correlated; see :mod:`service.core.holdout_bias`), so it warns; the fleet's pooled test, whose
variance comes from the spread across series, can fail the fleet. Both only when the bias is
material: at least ``min_sd`` in-sample residual RMS or ``min_percent`` of the level.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import numpy as np

from ..fleet_parts import FleetPart
from ..fleet_pooling import pooled_mean
from ..holdout_bias import fleet_holdout_bias, holdout_bias, training_rms
from ..registry import (
    CheckDef,
    CheckInputs,
    CheckPolicy,
    Finding,
    FleetFinding,
    FleetTest,
    Option,
    fmt,
)
from ..results import CheckResult, is_none, to_python
from .bias import MIN_PERCENT, MIN_SD, _material

if TYPE_CHECKING:
    from ..policy import Policy
    from ..runner import BatchChecks


def holdout_bias_check(inputs: CheckInputs, *, min_obs: int = 3) -> CheckResult:
    """The mean holdout error ``actual - forecast`` per series, tested against 0 with the EWC
    long-run variance along the path (Student t with ``B`` df; :func:`service.core.holdout_bias
    .path_bias`), with its percent of the holdout level and the in-sample residual RMS it is
    judged against (``residual_rms``)."""
    batch = inputs.batch
    found = holdout_bias(batch, min_obs=min_obs)
    ran = is_none(found.skip_reason)
    return CheckResult(
        name="holdout_bias",
        kind="test",
        statistic=np.where(ran, found.statistic, np.nan),
        p_value=np.where(ran, found.p_value, np.nan),
        details={
            "mean_error": np.where(ran, found.mean_error, np.nan),
            "percent_bias": np.where(ran, found.percent_bias, np.nan),
            "std_error": np.where(ran, found.std_error, np.nan),
            "df": np.where(ran, found.df, np.nan),
            "horizon": found.n_obs,
            "residual_rms": training_rms(batch, inputs.residuals),
            "method": np.full(batch.n_series, found.method, dtype=object),
        },
        skip_reason=found.skip_reason,
        null_hypothesis="the holdout forecast errors have mean zero",
    )


def _found(f: Finding) -> str:
    me = float(f.detail("mean_error"))
    side = "high" if me < 0 else "low"
    pct = float(f.detail("percent_bias"))
    pct_txt = "" if math.isnan(pct) else f" ({abs(pct):.2f}% of the level)"
    return (
        f"the forecasts run {side} by {abs(me):.4g}{pct_txt} over the "
        f"{int(f.detail('horizon'))}-step holdout (t = {fmt(f.statistic)} on "
        f"{fmt(float(f.detail('df')))} df, {f.p_text()})"
    )


def _material_series(result: CheckResult, cp: CheckPolicy) -> np.ndarray:
    d = result.details
    return _material(d["mean_error"], d["residual_rms"], d["percent_bias"], cp)


@dataclass(frozen=True)
class FleetHoldoutBias:
    """The fleet's pooled holdout bias (the result's ``fleet.holdout_bias``): the weighted
    mean of the series' mean holdout errors in units of their in-sample residual RMS
    (``standardised``), its 95% interval and two-sided p-value (t over series), the pooled
    mean error and percent of the level, the series used, and ``material``."""

    standardised: float
    ci_low: float
    ci_high: float
    p_value: float
    mean_error: float
    percent_bias: float
    series_used: int
    material: bool | None

    def to_dict(self) -> dict[str, Any]:
        return {k: to_python(v) for k, v in vars(self).items()}


_NO_FLEET = FleetHoldoutBias(*(float("nan"),) * 6, 0, None)


def _gather(checks: BatchChecks, weights: np.ndarray, policy: Policy) -> FleetPart:
    """Each series' standardised holdout mean error and its weight in the pooled mean (its
    holdout steps; 0 where the check skipped it or its scale is not positive)."""
    result = checks["holdout_bias"]
    use = ~result.skipped
    found = fleet_holdout_bias(checks.batch, weights=np.where(use, result.details["horizon"], 0))
    u = found.standardised
    return FleetPart(rows={"u": u, "w": np.where(np.isfinite(u), found.weights, 0.0)})


def _fleet(
    part: FleetPart, checks: BatchChecks, weights: np.ndarray, policy: Policy
) -> FleetFinding:
    cp = policy.check("holdout_bias")
    result = checks["holdout_bias"]
    use = ~result.skipped
    pooled = pooled_mean(part.rows["u"], part.rows["w"])
    if pooled.n_series < 2 or not np.isfinite(pooled.p_value):
        return FleetFinding(_NO_FLEET)
    n = np.where(use, result.details["horizon"], 0).astype(float)
    me = result.details["mean_error"]
    pct = result.details["percent_bias"]
    with np.errstate(invalid="ignore"):
        mean_error = float(np.nansum(n * me) / n.sum())
        percent = float(np.nansum(n * pct) / n.sum())
    min_sd = cp.option("min_sd")
    min_percent = cp.option("min_percent")
    by_sd = min_sd is not None and abs(pooled.estimate) >= float(min_sd)
    by_level = min_percent is not None and abs(percent) >= float(min_percent)
    material = bool(by_sd or by_level or (min_sd is None and min_percent is None))
    summary = FleetHoldoutBias(
        standardised=pooled.estimate,
        ci_low=pooled.ci_low,
        ci_high=pooled.ci_high,
        p_value=pooled.p_value,
        mean_error=mean_error,
        percent_bias=percent,
        series_used=pooled.n_series,
        material=material,
    )
    side = "high" if pooled.estimate < 0 else "low"
    horizon = int(np.max(n, initial=0))
    message = (
        f"Across the fleet the forecasts run {side} over the {horizon}-step holdout by "
        f"{abs(pooled.estimate):.2f} in-sample residual RMS ({abs(percent):.2f}% of the "
        f"level; 95% CI {pooled.ci_low:+.2f} to {pooled.ci_high:+.2f}, p = "
        f"{pooled.p_value:.2g}, {pooled.n_series:,} series): the model fits the training "
        "period but its forecasts drift; look for a level or trend that changed at the origin."
    )
    return FleetFinding(
        summary, p_value=pooled.p_value, material=material, message=message, warn_p=cp.fleet_warn_p
    )


_MATERIALITY = (
    Option("min_sd", kind="float", for_runner=False),
    Option("min_percent", kind="float", for_runner=False),
)

CHECKS = (
    CheckDef(
        name="holdout_bias",
        title="Holdout bias",
        kind="test",
        position=85,
        family="holdout bias",
        needs_holdout=True,
        tests=(
            "mean forecast error over the holdout is zero: EWC t test along each path; the "
            "fleet's pooled standardised mean error"
        ),
        null_hypothesis="the holdout forecast errors have mean zero",
        defaults=(
            "EWC with B = max(1, floor(0.4 H^(2/3))); series warn only; the fleet's pooled "
            "test fails; material at 0.1 in-sample residual RMS or 1% of the level"
        ),
        details=(
            "mean_error",
            "percent_bias",
            "std_error",
            "df",
            "horizon",
            "residual_rms",
            "method",
        ),
        source=(
            "Lazarus, Lewis, Stock & Watson (2018), JBES 36:541-559 (EWC); pooled over series "
            "with an HC1 variance (White 1980)"
        ),
        run=holdout_bias_check,
        # One path is weak evidence: a series only warns; the fleet's pooled test can fail.
        rule=CheckPolicy(
            warn_p=0.05,
            fleet_warn_p=0.05,
            fleet_fail_p=0.01,
            option_values=(("min_sd", MIN_SD), ("min_percent", MIN_PERCENT)),
        ),
        passed="no evidence that the holdout forecasts run high or low",
        found=_found,
        meaning="the forecasts drift from the actuals out of sample; refit on recent data",
        options=(Option("min_obs"), *_MATERIALITY),
        material=_material_series,
        fleet=FleetTest(
            key="holdout_bias", gather=_gather, finish=_fleet, empty=FleetFinding(_NO_FLEET)
        ),
    ),
)
