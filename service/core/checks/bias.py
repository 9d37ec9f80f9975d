"""Bias: is the mean residual zero, over the whole span and recently?"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import numpy as np

from ..batch import Residuals, SeriesBatch
from ..registry import (
    WARN,
    CheckDef,
    CheckInputs,
    CheckPolicy,
    Finding,
    FleetFinding,
    FleetTest,
    Option,
    SeriesSection,
    fmt,
)
from ..results import CheckResult, skip_reasons_and_ran, to_python
from ..tails import norm_sf_two_sided, t_ppf, t_sf_two_sided
from ..types import FloatVector, InputError, IntVector

if TYPE_CHECKING:
    from ..policy import Policy
    from ..runner import BatchChecks

BIAS_MIN_OBS = 3
TRACKING_TRADE_LIMIT = 4.0
TRACKING_DEFAULT_WINDOW = 12


def newey_west_lags(n_obs: IntVector | int) -> IntVector:
    """Newey-West truncation lag ``floor(4 (T / 100) ** (2 / 9))``.

    The rule statsmodels' ``sandwich_covariance`` uses (Newey & West 1994). ``T = 100`` gives 4,
    ``T = 20`` gives 2.
    """
    t = np.asarray(n_obs, dtype=float)
    return np.floor(4.0 * (t / 100.0) ** (2.0 / 9.0)).astype(np.int64)


def hac_variance_of_mean(res: Residuals, lags: IntVector) -> FloatVector:
    """Newey-West (Bartlett kernel) variance of the mean residual, per series.

    ``Var = (gamma_0 + 2 sum_{j=1..L} (1 - j / (L + 1)) gamma_j) / T``, with ``gamma_j`` the
    lag-``j`` autocovariance over observed pairs divided by ``T = n_obs`` (no small-sample
    correction): the ``cov_type="HAC", use_correction=False`` covariance of an OLS fit on a
    constant.
    """
    with np.errstate(invalid="ignore", over="ignore"):
        return _standard_hac_variance(res, lags) * res.unit * res.unit


def _standard_hac_variance(res: Residuals, lags: IntVector) -> FloatVector:
    """:func:`hac_variance_of_mean` divided by ``res.unit ** 2`` (computed on the standardised
    residuals, so it neither overflows nor underflows)."""
    lags = np.asarray(lags, dtype=np.int64)
    max_lag = int(lags.max(initial=0))
    gamma = res.standard_autocovariances(max_lag)
    j = np.arange(max_lag + 1)[None, :]
    weights = np.where(j <= lags[:, None], 1.0 - j / (lags[:, None] + 1.0), 0.0)
    weights[:, 0] = 1.0
    long_run = gamma[:, 0] + 2.0 * (weights[:, 1:] * gamma[:, 1:]).sum(axis=1)
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        return long_run / res.n_obs


def bias(
    res: Residuals,
    actuals_scale: FloatVector,
    *,
    hac_lags: int | None = None,
    ci_level: float = 0.95,
    min_obs: int = BIAS_MIN_OBS,
) -> CheckResult:
    """t test of a zero mean residual with a Newey-West (HAC) standard error.

    ``t = mean(e) / SE``, ``SE = sqrt(hac_variance_of_mean)`` with ``hac_lags`` from
    :func:`newey_west_lags` unless given (clamped to ``n_obs - 1``). The p-value is two-sided
    from Student's t with ``n_obs - 1`` degrees of freedom (statsmodels' OLS on a constant with
    ``cov_type="HAC", use_t=True``); the confidence interval is ``mean +- t_{(1+level)/2} SE``.

    ``percent_bias = 100 mean(e) / mean|actual|`` over the periods with a residual
    (``actuals_scale`` is that mean). ``e > 0`` means the forecasts run low: adding
    ``correction = mean(e)`` to them removes the bias.

    A series whose residuals are all equal (within rounding, see ``Residuals.constant``) but not
    zero has ``SE = 0``: it is biased for certain (``t = +-inf``, ``p = 0``). All-zero residuals
    (zero within the rounding of ``actual - fitted``) skip (a perfect fit has no bias to test),
    as do series with fewer than ``min_obs`` (default 3) residuals.
    """
    if hac_lags is not None and hac_lags < 0:
        raise InputError("hac_lags", f"must be 0 or more, got {hac_lags}")
    if not 0 < ci_level < 1:
        raise InputError("ci_level", f"must lie strictly between 0 and 1, got {ci_level}")
    n = res.n_obs
    lags = newey_west_lags(n) if hac_lags is None else np.full(n.shape, int(hac_lags))
    lags = np.minimum(np.maximum(lags, 0), np.maximum(n - 1, 0))
    var = _standard_hac_variance(res, lags)
    mean = res.mean
    # All zero within rounding: a fit that reproduces the actuals up to the last bits.
    # (A NaN mean, no residuals at all, counts as zero.)
    zero = res.constant & ~(np.abs(mean) > 1e-12 * res.rounding_scale)
    reasons, ran = skip_reasons_and_ran(
        n.shape[0],
        (n < max(min_obs, 2), f"fewer than {max(min_obs, 2)} residuals"),
        (zero, "residuals are all zero"),
    )
    df = np.maximum(n - 1, 1).astype(float)
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        # Residuals equal within rounding have no sampling variation: SE is 0, not noise.
        se = np.where(res.constant, 0.0, res.unit * np.sqrt(np.maximum(var, 0.0)))
        t = np.where(se > 0, mean / se, np.sign(mean) * np.inf)
        p = t_sf_two_sided(t, df)
        q = t_ppf(0.5 + ci_level / 2.0, df)
        pct = 100.0 * mean / actuals_scale
    t = np.where(ran, t, np.nan)
    p = np.where(ran, p, np.nan)
    mean_r = np.where(ran, mean, np.nan)
    se_r = np.where(ran, se, np.nan)
    return CheckResult(
        name="bias",
        kind="test",
        statistic=t,
        p_value=p,
        details={
            "mean_error": mean_r,
            "std_error": se_r,
            "ci_low": mean_r - q * se_r,
            "ci_high": mean_r + q * se_r,
            "ci_level": np.full(n.shape, ci_level),
            "percent_bias": np.where(ran & np.isfinite(pct), pct, np.nan),
            "correction": mean_r,
            "hac_lags": lags,
            "df": np.where(ran, n - 1, 0),
            "n_obs": n,
        },
        skip_reason=reasons,
        null_hypothesis="the residuals have mean zero",
    )


def tracking_signal(
    res: Residuals, *, window: int = TRACKING_DEFAULT_WINDOW, min_obs: int | None = None
) -> CheckResult:
    """Recent bias: the sum of the last ``window`` residuals over their mean absolute error.

    ``TS = sum(e_last) / (sum(|e_last|) / w)``, the trade's tracking signal (common practice),
    over the last ``w = window`` observed residuals. Its p-value does not come from the trade's
    fixed limit of 4 (whose false-alarm rate grows with the window) but from the null
    distribution of the sum: with independent errors of the series' own variance ``s^2``
    (sample variance of all its residuals, ``ddof = 1``), ``sum(e_last) ~ N(0, w s^2)``, so
    ``z = sum(e_last) / (s sqrt(w))`` and ``p = 2 sf(|z|)`` (normal approximation). Whether
    ``|TS| > 4`` is reported in ``details`` as ``beyond_trade_limit`` for reference.

    Skipped when fewer than ``min_obs`` residuals are observed (default ``2 * window``, so the
    variance rests on more than the window itself; never below ``window + 1``), when the
    window's errors are all zero, or when the residuals are constant (within rounding).
    """
    if window < 2:
        raise InputError("window", f"must be at least 2, got {window}")
    need = 2 * window if min_obs is None else max(min_obs, window + 1)
    n = res.n_obs
    observed = res.observed
    # Rank of each observed residual counted from the end of its row: 1 is the last.
    rank_from_end = np.cumsum(observed[:, ::-1], axis=1)[:, ::-1]
    recent = observed & (rank_from_end <= window)
    e = np.where(recent, res.values, 0.0)
    total = e.sum(axis=1)
    abs_total = np.abs(e).sum(axis=1)
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        # Sample variance in units of res.unit (standardised residuals): no overflow.
        var = np.vecdot(res.standard, res.standard) / (n - 1)
        ts = window * total / abs_total
        z = (total / res.unit) / np.sqrt(window * var)
    p = norm_sf_two_sided(z)
    reasons, ran = skip_reasons_and_ran(
        n.shape[0],
        (n < need, f"fewer than {need} residuals for a window of {window}"),
        (abs_total == 0, f"the last {window} residuals are all zero"),
        (res.constant | ~(var > 0), "residuals are constant"),
    )
    return CheckResult(
        name="tracking_signal",
        kind="test",
        statistic=np.where(ran, ts, np.nan),
        p_value=np.where(ran, p, np.nan),
        details={
            "window": np.full(n.shape, window),
            "sum_error": np.where(ran, total, np.nan),
            "mean_absolute_error": np.where(ran, abs_total / window, np.nan),
            "z": np.where(ran, z, np.nan),
            "trade_limit": np.full(n.shape, TRACKING_TRADE_LIMIT),
            "beyond_trade_limit": ran & (np.abs(ts) > TRACKING_TRADE_LIMIT),
        },
        skip_reason=reasons,
        null_hypothesis="the last errors have mean zero",
    )


# ------------------------------------------------------------------------------- declarations


def _mean_abs_actual(batch: SeriesBatch, res: Residuals) -> np.ndarray:
    a = np.where(res.observed, np.abs(batch.actuals), 0.0)
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        return a.sum(axis=1) / res.n_obs


def _run_bias(inputs: CheckInputs, **options: Any) -> CheckResult:
    res = inputs.residuals
    return bias(res, _mean_abs_actual(inputs.batch, res), **options)


def _bias_found(f: Finding) -> str:
    me = float(f.detail("mean_error"))
    side = "low" if me > 0 else "high"
    pct = float(f.detail("percent_bias"))
    pct_txt = "" if math.isnan(pct) else f", {pct:+.2f}% of the level"
    return (
        f"residuals average {me:+.4g} (95% CI {fmt(float(f.detail('ci_low')), 4)} to "
        f"{fmt(float(f.detail('ci_high')), 4)}{pct_txt}; t = {fmt(f.statistic)}, "
        f"{f.p_text()}, {int(f.detail('hac_lags'))} Newey-West lags): the forecasts run "
        f"{side}; adding {me:+.4g} to them would remove the bias"
    )


def _tracking_found(f: Finding) -> str:
    total = float(f.detail("sum_error"))
    side = "low" if total > 0 else "high"
    return (
        f"the last {int(f.detail('window'))} errors sum to {total:+.4g} (tracking signal "
        f"{fmt(f.statistic)}, {f.p_text()}): recently the forecasts run {side}"
    )


@dataclass(frozen=True)
class FleetBias:
    """Aggregate bias over the fleet.

    ``mean_error`` is the weighted mean of the series' mean errors (the policy's weighting),
    ``percent_bias`` is ``100 sum(e) / sum|y|`` pooled over every residual period (so volume
    weighted), ``std_error`` is ``sqrt(sum w_i^2 SE_i^2) / sum w_i`` with the series' HAC
    standard errors, which treats series as independent; ``statistic = mean_error / std_error``
    and ``p_value`` is two-sided normal.
    """

    mean_error: float
    percent_bias: float
    std_error: float
    statistic: float
    p_value: float
    series_used: int

    def to_dict(self) -> dict[str, Any]:
        return {
            k: to_python(getattr(self, k))
            for k in (
                "mean_error",
                "percent_bias",
                "std_error",
                "statistic",
                "p_value",
                "series_used",
            )
        }


_NO_FLEET_BIAS = FleetBias(*(float("nan"),) * 5, series_used=0)


def fleet_bias(checks: BatchChecks, weights: np.ndarray) -> FleetBias:
    """The :class:`FleetBias` of one batch's checks, with the fleet's series weights."""
    b = checks["bias"]
    me, se = b.details["mean_error"], b.details["std_error"]
    use = np.isfinite(me) & np.isfinite(se)
    w = weights[use]
    total = w.sum()
    if total <= 0:
        w, total = np.ones(int(use.sum())), float(use.sum())
    if total == 0:
        return _NO_FLEET_BIAS
    res = checks.residuals
    observed = res.observed[use]
    pooled_e = np.where(observed, res.values[use], 0.0).sum()
    pooled_y = np.where(observed, np.abs(checks.batch.actuals[use]), 0.0).sum()
    # Weighted mean and its standard error sqrt(sum w^2 SE^2) / sum w, computed with the
    # weight shares and the largest term factored out, so values near the accepted magnitude
    # neither overflow nor underflow.
    share = w / total
    mean = float((share * me[use]).sum())
    spread = np.abs(share * se[use])
    peak = float(spread.max(initial=0.0))
    std = peak * float(np.sqrt(np.square(spread / peak).sum())) if peak > 0 else 0.0
    with np.errstate(invalid="ignore", divide="ignore"):
        z = mean / std if std > 0 else (np.sign(mean) * np.inf if mean else np.nan)
        pct = float(100.0 * pooled_e / pooled_y) if pooled_y > 0 else float("nan")
    p = float(norm_sf_two_sided(z)) if z == z else float("nan")  # z == z: not NaN
    return FleetBias(mean, pct, std, float(z), p, int(use.sum()))


def _fleet_bias_message(b: FleetBias) -> str:
    direction = "low" if b.mean_error > 0 else "high"
    return (
        f"Across the fleet the forecasts run {direction}: the weighted mean error is "
        f"{b.mean_error:+.3g} ({b.percent_bias:+.2f}% of volume; z = {b.statistic:.2f}, "
        f"p = {b.p_value:.2g}, series taken as independent). No single series need be "
        "significant for this to matter in aggregate: check for a shared level shift or a "
        "biased transformation."
    )


def _judge_fleet_bias(checks: BatchChecks, weights: np.ndarray, policy: Policy) -> FleetFinding:
    """The fleet bias warns the fleet when its p-value is below ``fleet.bias_warn_p``."""
    found = fleet_bias(checks, weights)
    limit = policy.fleet.bias_warn_p
    if limit is not None and np.isfinite(found.p_value) and found.p_value < limit:
        return FleetFinding(found, WARN, _fleet_bias_message(found))
    return FleetFinding(found)


CHECKS = (
    CheckDef(
        name="bias",
        title="Bias",
        kind="test",
        position=20,
        family="bias",
        needs_holdout=False,
        tests="mean residual is zero: t test with a Newey-West (HAC, Bartlett) standard error",
        null_hypothesis="the residuals have mean zero",
        defaults="hac_lags = floor(4 (T/100)^(2/9)); Student t with T-1 df; 95% interval",
        details=(
            "mean_error",
            "std_error",
            "ci_low",
            "ci_high",
            "percent_bias",
            "correction",
            "hac_lags",
            "df",
        ),
        source="Newey & West (1987), Econometrica 55:703-708; lag rule Newey & West (1994)",
        run=_run_bias,
        # Essential: warn at adjusted p < 0.05, fail at < 0.01 (this project's choice).
        rule=CheckPolicy(warn_p=0.05, fail_p=0.01),
        passed="no evidence that the mean residual differs from zero",
        found=_bias_found,
        meaning="look for a missing level, trend or calendar term before shipping",
        options=(Option("min_obs"), Option("hac_lags"), Option("ci_level", in_policy=False)),
        section=SeriesSection(
            key="bias",
            fields=(
                ("mean_error", "bias", "mean_error"),
                ("std_error", "bias", "std_error"),
                ("ci_low", "bias", "ci_low"),
                ("ci_high", "bias", "ci_high"),
                ("percent_bias", "bias", "percent_bias"),
                ("tracking_signal", "tracking_signal", "statistic"),
            ),
        ),
        fleet=FleetTest(key="bias", compute=_judge_fleet_bias, empty=FleetFinding(_NO_FLEET_BIAS)),
    ),
    CheckDef(
        name="tracking_signal",
        title="Tracking signal",
        kind="test",
        position=30,
        family="bias",
        needs_holdout=False,
        tests="recent bias: sum of the last errors over their mean absolute error",
        null_hypothesis="the last errors have mean zero",
        defaults="window 12 (common practice); p-value from N(0, w s^2) for the sum",
        details=(
            "window",
            "sum_error",
            "mean_absolute_error",
            "z",
            "trade_limit",
            "beyond_trade_limit",
        ),
        source="Brown (1959), Statistical Forecasting for Inventory Control; trade practice",
        run=lambda inputs, **options: tracking_signal(inputs.residuals, **options),
        # Recent bias warns, never fails, by default.
        rule=CheckPolicy(warn_p=0.01),
        passed="no evidence of bias in the most recent errors",
        found=_tracking_found,
        meaning=(
            "the forecasts have drifted recently; look for a level shift or a change the "
            "model has not caught up with"
        ),
        options=(Option("min_obs"), Option("window", minimum=2)),
    ),
)
