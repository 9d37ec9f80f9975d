"""Bias: is the mean residual zero, over the whole span, recently, and across the fleet?

The per-series test is the EWC t test of :mod:`service.core.ewc` (exact under independent normal
errors, fixed-b under autocorrelation); the Newey-West t test below is reported beside it. The
fleet's test is Driscoll-Kraay (:mod:`service.core.fleet_bias`). A significant bias warns or
fails only when it is also material: at least ``min_sd`` residual standard deviations or
``min_percent`` of the level.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import numpy as np

from ..batch import Residuals, SeriesBatch, abs_actual_sums
from ..ewc import ewc_bias, series_bins
from ..fleet_bias import fleet_bias_from_parts, fleet_bias_part
from ..fleet_parts import FleetPart
from ..registry import (
    PASS,
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
from ..tails import t_ppf, t_sf_two_sided
from ..types import FloatVector, InputError, IntVector

if TYPE_CHECKING:
    from ..policy import Policy
    from ..runner import BatchChecks

BIAS_MIN_OBS = 3
TRACKING_TRADE_LIMIT = 4.0
TRACKING_DEFAULT_WINDOW = 12
TRACKING_VOLATILE_RATIO = 1.25
"""A window whose own variance exceeds this many times the whole sample's second moment is
judged on its own evidence: its one-sample t statistic on ``w - 1`` degrees of freedom. A project
rule, measured in the README's gate study: under volatility clustering (GARCH) such windows are
where the whole-sample reference is too light in the far tail; a level shift raises the second
moment, not the window's variance about its own mean, so it rarely crosses the ratio."""


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


def newey_west_bias(
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
        name="newey_west_bias",
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
    res: Residuals,
    *,
    window: int = TRACKING_DEFAULT_WINDOW,
    min_obs: int | None = None,
    actuals_scale: FloatVector | None = None,
) -> CheckResult:
    """Recent bias: the sum of the last ``window`` residuals over their mean absolute error.

    ``TS = sum(e_last) / (sum(|e_last|) / w)``, the trade's tracking signal (common practice),
    over the last ``w = window`` observed residuals. Its p-value does not come from the trade's
    fixed limit of 4 (whose false-alarm rate grows with the window) but from the null
    distribution of the sum: with ``X = sum(e_last) / sqrt(w)``, ``s0^2 = sum(e^2) / n`` over
    all ``n`` residuals (about zero, the null's mean) and ``sw`` the window's own standard
    deviation (about its mean, ddof 1), ``z = X / max(s0, sw)`` and
    ``t = z sqrt((n - 1) / (n - z^2))``, referred to Student t with ``n - 1`` degrees of
    freedom: with ``s0`` alone that is exact under independent ``N(0, sigma^2)`` errors
    (``sum(e^2) = X^2 + R`` with ``R ~ sigma^2 chi2_{n-1}`` independent of ``X``), so the
    larger denominator only makes the test more careful there, while ``sw`` keeps a window
    of high volatility (errors whose variance comes and goes) from passing for a shift
    (measured: the README's gate study). ``p = 2 sf(|t|)``. Where ``sw^2`` exceeds
    :data:`TRACKING_VOLATILE_RATIO` times ``s0^2`` the window is volatile and ``z`` itself, then
    the window's one-sample t statistic (exact on ``w - 1`` degrees of freedom under independent
    normal errors, whatever their variance in the window), is referred to Student t with
    ``w - 1`` degrees of freedom; ``details.volatile_window`` marks it. Whether
    ``|TS| > 4`` is reported in ``details`` as ``beyond_trade_limit`` for reference.

    ``details`` also hold the window's mean error ``mean_recent``, as a percent of the level
    (``percent_recent``, with ``actuals_scale`` the mean ``|actual|``) and the residual
    standard deviation ``residual_sd`` (``s``), for the materiality rule.

    Skipped when fewer than ``min_obs`` residuals are observed (default ``2 * window``, so the
    variance rests on more than the window itself; never below ``window + 1``), when the
    window's errors are all zero, or when the residuals are constant (within rounding).
    """
    if window < 2:
        raise InputError("window", f"must be at least 2, got {window}")
    need = 2 * window if min_obs is None else max(min_obs, window + 1)
    n = res.n_obs
    recent = _last_observed(res, window)
    e = np.where(recent, res.values, 0.0)
    total = e.sum(axis=1)
    outside = ~recent
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        abs_total = np.abs(e).sum(axis=1)
        # Sample variance in units of res.unit (standardised residuals): no overflow.
        squares = res.lag_products(0)
        var = squares / (n - 1)
        # Second moment about zero (the null's mean) of all residuals, and the window's own
        # variance about its mean, both in units of res.unit.
        shift = res.mean / res.unit
        second = (squares + n * shift * shift) / n
        w_mean = total / window / res.unit
        w_dev = np.divide(e, res.unit[:, None], out=e)  # e inside the window: its values
        w_dev -= w_mean[:, None]
        w_dev[outside] = 0.0
        w_var = np.vecdot(w_dev, w_dev) / (window - 1)
        ts = window * total / abs_total
        z = (total / res.unit) / np.sqrt(window * np.maximum(second, w_var))
        t_exact = z * np.sqrt((n - 1) / np.maximum(n - z * z, 0.0))
        pct = (
            np.full(n.shape, np.nan)
            if actuals_scale is None
            else 100.0 * (total / window) / np.asarray(actuals_scale, dtype=float)
        )
    volatile = w_var > TRACKING_VOLATILE_RATIO * second
    t_exact = np.where(volatile, z, t_exact)
    df_used = np.where(volatile, window - 1, np.maximum(n - 1, 1))
    p = t_sf_two_sided(t_exact, df_used.astype(float))
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
            "mean_recent": np.where(ran, total / window, np.nan),
            "percent_recent": np.where(ran & np.isfinite(pct), pct, np.nan),
            "residual_sd": np.where(ran, res.unit * np.sqrt(var), np.nan),
            "mean_absolute_error": np.where(ran, abs_total / window, np.nan),
            "z": np.where(ran, z, np.nan),
            "t": np.where(ran, t_exact, np.nan),
            "df": np.where(ran, df_used, 0),
            "volatile_window": ran & volatile,
            "trade_limit": np.full(n.shape, TRACKING_TRADE_LIMIT),
            "beyond_trade_limit": ran & (np.abs(ts) > TRACKING_TRADE_LIMIT),
        },
        skip_reason=reasons,
        null_hypothesis="the last errors have mean zero",
    )


def _last_observed(res: Residuals, window: int) -> np.ndarray:
    """Where each row's last ``window`` observed residuals are (all of them in a shorter row).
    A row without a gap holds its observed residuals in the columns ``start..length - 1``, so
    those are the columns from ``max(start, length - window)``; the other rows count their
    observed residuals from the end."""
    observed = res.observed
    width = observed.shape[1]
    plain = res.n_missing == 0
    if plain.all():
        cols = np.arange(width)[None, :]
        begin = np.maximum(res.start, res.lengths - window)
        return (cols >= begin[:, None]) & (cols < res.lengths[:, None])
    # Rank of each observed residual counted from the end of its row: 1 is the last.
    rank_from_end = np.cumsum(observed[:, ::-1], axis=1)[:, ::-1]
    return observed & (rank_from_end <= window)


MIN_SD = 0.1
"""Default smallest bias that matters, in residual standard deviations: a bias of ``d`` sd adds
``d^2`` to the mean squared error relative to the variance, so 0.1 sd adds 1%."""
MIN_PERCENT = 1.0
"""Default smallest bias that matters as a share of the level (percent): planners size stock
and staff on the level, and a 1% aggregate bias is where they start to notice."""


def bias(
    res: Residuals,
    actuals_scale: FloatVector,
    *,
    bins: int | None = None,
    hac_lags: int | None = None,
    ci_level: float = 0.95,
    min_obs: int = BIAS_MIN_OBS,
) -> CheckResult:
    """t test of a zero mean residual with a small-sample correction, Newey-West beside it.

    The test is the EWC t test of :func:`service.core.ewc.ewc_bias` (Lazarus, Lewis, Stock &
    Watson 2018): ``t = mean / SE`` with the equal-weighted cosine long-run variance on
    ``B = max(floor(T / 6), floor(0.4 T^(2/3)), 2)`` cosine terms
    (:func:`service.core.ewc.series_bins`, or ``bins``) and Student t with ``B``
    degrees of freedom; the interval ``mean +- t_{B,(1+level)/2} SE`` comes from it.
    ``details`` keep the Newey-West figures of :func:`newey_west_bias` (``hac_lags``,
    ``nw_std_error``, ``nw_t``, ``nw_p_value``), the residual standard deviation
    (``residual_sd``, ddof 1) and ``method = "ewc"``.

    ``percent_bias = 100 mean(e) / mean|actual|`` over the periods with a residual
    (``actuals_scale`` is that mean). ``e > 0`` means the forecasts run low: adding
    ``correction = mean(e)`` to them removes the bias. Residuals all equal but not zero are
    biased for certain (``t = +-inf``, ``p = 0``); all-zero residuals and series with fewer
    than ``min_obs`` (at least 3) residuals skip.
    """
    # At least 1 for the argument check; capped at T - 1 inside (0 where T < 2, as skipped).
    b = np.maximum(series_bins(res.n_obs), 1) if bins is None else bins
    ewc = ewc_bias(res, actuals_scale, bins=b, ci_level=ci_level, min_obs=min_obs)
    nw = newey_west_bias(res, actuals_scale, hac_lags=hac_lags, ci_level=ci_level, min_obs=min_obs)
    ran = ~ewc.skipped
    n = res.n_obs
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        sd = res.unit * np.sqrt(res.lag_products(0) / (n - 1))
    d = ewc.details
    return CheckResult(
        name="bias",
        kind="test",
        statistic=ewc.statistic,
        p_value=ewc.p_value,
        details={
            "mean_error": d["mean_error"],
            "std_error": d["std_error"],
            "ci_low": d["ci_low"],
            "ci_high": d["ci_high"],
            "ci_level": d["ci_level"],
            "percent_bias": d["percent_bias"],
            "correction": d["mean_error"],
            "residual_sd": np.where(ran & np.isfinite(sd), sd, np.nan),
            "df": d["df"],
            "bins": d["bins"],
            "method": np.full(n.shape, "ewc", dtype=object),
            "hac_lags": nw.details["hac_lags"],
            "nw_std_error": nw.details["std_error"],
            "nw_t": nw.statistic,
            "nw_p_value": nw.p_value,
            "n_obs": n,
        },
        skip_reason=ewc.skip_reason,
        null_hypothesis="the residuals have mean zero",
    )


# ------------------------------------------------------------------------------- declarations


def _mean_abs_actual(batch: SeriesBatch, res: Residuals) -> np.ndarray:
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        return abs_actual_sums(batch, res) / res.n_obs


def _run_bias(inputs: CheckInputs, **options: Any) -> CheckResult:
    res = inputs.residuals
    return bias(res, _mean_abs_actual(inputs.batch, res), **options)


def _run_tracking(inputs: CheckInputs, **options: Any) -> CheckResult:
    res = inputs.residuals
    return tracking_signal(res, actuals_scale=_mean_abs_actual(inputs.batch, res), **options)


def _bounds(cp: CheckPolicy) -> tuple[float, float]:
    """The policy's materiality bounds: (residual sd multiple, percent of the level)."""
    min_sd = cp.option("min_sd")
    min_percent = cp.option("min_percent")
    return (
        np.inf if min_sd is None else float(min_sd),
        np.inf if min_percent is None else float(min_percent),
    )


def _material(size: np.ndarray, sd: np.ndarray, percent: np.ndarray, cp: CheckPolicy) -> np.ndarray:
    """``|size| >= min_sd * sd`` or ``|percent| >= min_percent`` (either bound suffices; a
    bound left out of the policy never does; with both left out every effect matters)."""
    min_sd, min_percent = _bounds(cp)
    if np.isinf(min_sd) and np.isinf(min_percent):
        return np.ones(size.shape, dtype=bool)
    with np.errstate(invalid="ignore"):
        by_sd = np.abs(size) >= min_sd * sd
        by_level = np.abs(percent) >= min_percent
    # Constant residuals (sd 0) with a non-zero mean are material by the sd rule.
    return by_sd | by_level


def _bias_material(result: CheckResult, cp: CheckPolicy) -> np.ndarray:
    d = result.details
    return _material(d["mean_error"], d["residual_sd"], d["percent_bias"], cp)


def _bounds_text(cp: CheckPolicy) -> str:
    min_sd, min_percent = _bounds(cp)
    parts = []
    if np.isfinite(min_sd):
        parts.append(f"{min_sd:g} residual sd")
    if np.isfinite(min_percent):
        parts.append(f"{min_percent:g}% of the level")
    return " or ".join(parts)


def _bias_found(f: Finding) -> str:
    me = float(f.detail("mean_error"))
    side = "low" if me > 0 else "high"
    pct = float(f.detail("percent_bias"))
    pct_txt = "" if math.isnan(pct) else f", {pct:+.2f}% of the level"
    return (
        f"residuals average {me:+.4g} (95% CI {fmt(float(f.detail('ci_low')), 4)} to "
        f"{fmt(float(f.detail('ci_high')), 4)}{pct_txt}; t = {fmt(f.statistic)} on "
        f"{int(f.detail('df'))} df, {f.p_text()}): the forecasts run "
        f"{side}; adding {me:+.4g} to them would remove the bias"
    )


def _immaterial_notes(
    result: CheckResult, immaterial: np.ndarray, what: str, size_key: str
) -> dict[int, str]:
    """Pass sentences for significant effects below the policy's materiality bounds."""
    out = {}
    for i in np.flatnonzero(immaterial).tolist():
        size = float(result.details[size_key][i])
        pct = float(result.details["percent_bias"][i]) if "percent_bias" in result.details else 0
        pct_txt = "" if math.isnan(pct) else f", {pct:+.2f}% of the level"
        out[i] = (
            f"{what} {size:+.4g}{pct_txt} is statistically significant but smaller than the "
            "policy's bound for a bias that matters, so it passes"
        )
    return out


def _bias_notes(
    result: CheckResult, p_adj: np.ndarray, codes: np.ndarray, immaterial: np.ndarray
) -> dict[int, str]:
    return _immaterial_notes(result, immaterial, "the mean residual", "mean_error")


def _tracking_found(f: Finding) -> str:
    total = float(f.detail("sum_error"))
    side = "low" if total > 0 else "high"
    return (
        f"the last {int(f.detail('window'))} errors sum to {total:+.4g}, a mean of "
        f"{float(f.detail('mean_recent')):+.4g} (tracking signal {fmt(f.statistic)}, "
        f"{f.p_text()}): recently the forecasts run {side}"
    )


def _tracking_material(result: CheckResult, cp: CheckPolicy) -> np.ndarray:
    d = result.details
    return _material(d["mean_recent"], d["residual_sd"], d["percent_recent"], cp)


def _tracking_notes(
    result: CheckResult, p_adj: np.ndarray, codes: np.ndarray, immaterial: np.ndarray
) -> dict[int, str]:
    """A tracking signal beyond the trade's limit of 4 that the test does not find significant
    says so, and so does a significant but immaterial recent bias: the sentence never
    contradicts the number beside it."""
    out = _immaterial_notes(result, immaterial, "the mean of the recent errors", "mean_recent")
    beyond = result.details["beyond_trade_limit"] & (codes == PASS) & ~immaterial
    for i in np.flatnonzero(beyond).tolist():
        ts = float(result.statistic[i])
        p = float(p_adj[i]) if np.isfinite(p_adj[i]) else float(result.p_value[i])
        out[i] = (
            f"the tracking signal {ts:+.3g} is beyond the trade's limit of 4, but with these "
            f"errors' spread the recent bias is not significant (p = {fmt(p, 2)} adjusted "
            "across series): watch the next periods"
        )
    return out


@dataclass(frozen=True)
class FleetBiasSummary:
    """Aggregate bias over one fleet (the result's ``fleet.bias``).

    ``mean_error`` is the weighted mean of the series' mean errors (the policy's weighting),
    ``percent_bias`` ``100 sum(e) / sum|y|`` pooled over every residual period, ``std_error``
    its Driscoll-Kraay standard error (errors shared across series allowed for), ``statistic``
    and ``p_value`` the t test on ``df`` degrees of freedom, ``ci_low``/``ci_high`` its 95%
    interval, ``residual_sd`` the pooled residual standard deviation, ``series_used`` the
    series in it; ``independent_std_error`` and ``independent_p_value`` are what a test that
    treats the series as independent would say (for comparison), and ``material`` whether the
    bias is large enough to matter under the policy.
    """

    mean_error: float
    percent_bias: float
    std_error: float
    statistic: float
    p_value: float
    series_used: int
    df: float
    ci_low: float
    ci_high: float
    residual_sd: float
    independent_std_error: float
    independent_p_value: float
    material: bool | None
    method: str = "driscoll-kraay"

    def to_dict(self) -> dict[str, Any]:
        return {k: to_python(v) for k, v in vars(self).items()}


_NO_FLEET_BIAS = FleetBiasSummary(*(float("nan"),) * 5, 0, *(float("nan"),) * 6, None)


def _gather_fleet_bias(checks: BatchChecks, weights: np.ndarray, policy: Policy) -> FleetPart:
    """One block's share of the fleet bias (:func:`fleet_bias_part`), with each series' sums of
    its residuals and of its absolute actuals over the residual periods."""
    use = ~checks["bias"].skipped
    res = checks.residuals
    w = np.where(use, weights, 0.0)
    counts = None if (w > 0).any() else use.astype(float)
    part = fleet_bias_part(res, w, min_obs=BIAS_MIN_OBS, counts=counts)
    sums = {  # over the residual periods of the series used, 0 for the others
        "e_sum": np.where(use, res.value_sums, 0.0),
        "y_sum": np.where(use, abs_actual_sums(checks.batch, res), 0.0),
    }
    return FleetPart(rows={**part.rows, **sums}, scaled=part.scaled)


def fleet_bias_summary(
    checks: BatchChecks, weights: np.ndarray, cp: CheckPolicy, part: FleetPart
) -> FleetBiasSummary:
    """The :class:`FleetBiasSummary` of a fleet's checks, with its series weights, from the
    parts its blocks gathered (:func:`_gather_fleet_bias`, combined in order)."""
    b = checks["bias"]
    use = ~b.skipped
    if not use.any():
        return _NO_FLEET_BIAS
    w = np.where(use, weights, 0.0)
    counted = not (w > 0).any()
    if counted:
        w = use.astype(float)
    # Rows the per-series test skipped take no part (weight 0 drops them).
    found = fleet_bias_from_parts(part, counted=counted, min_obs=BIAS_MIN_OBS)
    if found.skip_reason[0] is not None:
        return _NO_FLEET_BIAS
    pooled_e = part.rows["e_sum"][use].sum()
    pooled_y = part.rows["y_sum"][use].sum()
    share = w[use] / w[use].sum()
    # Pooled residual sd sqrt(sum s_i sd_i^2), with the largest sd factored out (no overflow).
    sds = np.where(np.isfinite(b.details["residual_sd"][use]), b.details["residual_sd"][use], 0.0)
    peak = float(sds.max(initial=0.0))
    sd = peak * float(np.sqrt((share * np.square(sds / peak)).sum())) if peak > 0 else 0.0
    with np.errstate(invalid="ignore", divide="ignore"):
        pct = float(100.0 * pooled_e / pooled_y) if pooled_y > 0 else float("nan")
    theta = float(found.theta[0])
    material = bool(_material(np.array([theta]), np.array([sd]), np.array([pct]), cp)[0])
    return FleetBiasSummary(
        mean_error=theta,
        percent_bias=pct,
        std_error=float(found.std_error[0]),
        statistic=float(found.t[0]),
        p_value=float(found.p_value[0]),
        series_used=int(found.n_series[0]),
        df=float(found.df[0]),
        ci_low=float(found.ci_low[0]),
        ci_high=float(found.ci_high[0]),
        residual_sd=sd,
        independent_std_error=float(found.naive_std_error[0]),
        independent_p_value=float(found.naive_p_value[0]),
        material=material,
    )


def _fleet_bias_message(b: FleetBiasSummary) -> str:
    direction = "low" if b.mean_error > 0 else "high"
    return (
        f"Across the fleet the forecasts run {direction}: the weighted mean error is "
        f"{b.mean_error:+.3g} ({b.percent_bias:+.2f}% of volume; 95% CI {b.ci_low:+.3g} to "
        f"{b.ci_high:+.3g}, t = {b.statistic:.2f} on {b.df:g} df, p = {b.p_value:.2g}, "
        f"Driscoll-Kraay, so errors shared across series are allowed for). No single series "
        "need be significant for this to matter in aggregate: check for a shared level shift "
        "or a biased transformation."
    )


def _judge_fleet_bias(
    part: FleetPart, checks: BatchChecks, weights: np.ndarray, policy: Policy
) -> FleetFinding:
    """The fleet bias: judged by the gate at the bias check's ``fleet_warn_p`` (or the
    fleet's ``bias_warn_p``, its earlier name) and ``fleet_fail_p``, when material."""
    cp = policy.check("bias")
    found = fleet_bias_summary(checks, weights, cp, part)
    warn_p = policy.fleet.bias_warn_p if policy.fleet.bias_warn_p is not None else cp.fleet_warn_p
    return FleetFinding(
        found,
        p_value=found.p_value,
        material=bool(found.material),
        message=_fleet_bias_message(found),
        warn_p=warn_p,
    )


_MATERIALITY = (
    Option("min_sd", kind="float", for_runner=False),
    Option("min_percent", kind="float", for_runner=False),
)


CHECKS = (
    CheckDef(
        name="bias",
        title="Bias",
        kind="test",
        position=20,
        family="bias",
        needs_holdout=False,
        tests=(
            "mean residual is zero: t test with the equal-weighted cosine (EWC) long-run "
            "variance, Newey-West beside it; the fleet's weighted mean error by Driscoll-Kraay"
        ),
        null_hypothesis="the residuals have mean zero",
        defaults=(
            "B = max(floor(T/6), floor(0.4 T^(2/3)), 2) cosine terms, Student t with B df; "
            "95% interval; "
            "material at 0.1 residual sd or 1% of the level; Newey-West lags "
            "floor(4 (T/100)^(2/9)) in details"
        ),
        details=(
            "mean_error",
            "std_error",
            "ci_low",
            "ci_high",
            "percent_bias",
            "correction",
            "residual_sd",
            "df",
            "bins",
            "method",
            "hac_lags",
            "nw_std_error",
            "nw_t",
            "nw_p_value",
        ),
        source=(
            "Lazarus, Lewis, Stock & Watson (2018), JBES 36:541-559 (EWC); Newey & West (1987), "
            "Econometrica 55:703-708; Driscoll & Kraay (1998), REStat 80:549-560"
        ),
        run=_run_bias,
        # Essential: warn at adjusted p < 0.05, fail at < 0.01, within the fleet's families;
        # the fleet bias likewise; materiality bounds as documented at MIN_SD, MIN_PERCENT.
        rule=CheckPolicy(
            warn_p=0.05,
            fail_p=0.01,
            fleet_warn_p=0.05,
            fleet_fail_p=0.01,
            option_values=(("min_sd", MIN_SD), ("min_percent", MIN_PERCENT)),
        ),
        passed="no evidence that the mean residual differs from zero",
        found=_bias_found,
        meaning="look for a missing level, trend or calendar term before shipping",
        options=(
            Option("min_obs"),
            Option("bins", minimum=1),
            Option("hac_lags"),
            Option("ci_level", in_policy=False),
            *_MATERIALITY,
        ),
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
        fleet=FleetTest(
            key="bias",
            gather=_gather_fleet_bias,
            finish=_judge_fleet_bias,
            empty=FleetFinding(_NO_FLEET_BIAS),
        ),
        essential=True,
        material=_bias_material,
        pass_notes=_bias_notes,
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
        defaults=(
            "window 12 (common practice); t test of the window's sum against the larger of the "
            "series' second moment and the window's own spread; material at 0.1 residual sd "
            "or 1% of the level"
        ),
        details=(
            "window",
            "sum_error",
            "mean_recent",
            "percent_recent",
            "residual_sd",
            "mean_absolute_error",
            "z",
            "t",
            "df",
            "volatile_window",
            "trade_limit",
            "beyond_trade_limit",
        ),
        source="Brown (1959), Statistical Forecasting for Inventory Control; trade practice",
        run=_run_tracking,
        # A recent shift that is significant and material fails the series.
        rule=CheckPolicy(
            warn_p=0.05,
            # Half the essential checks' fail level: its far tail is the least sure under
            # volatility that comes and goes; a shift shows first in the series it hits, so
            # 1% of the weight failing it fails the fleet (both measured in the README's gate
            # study).
            fail_p=0.005,
            warn_share=0.01,
            fail_share=0.01,
            option_values=(("min_sd", MIN_SD), ("min_percent", MIN_PERCENT)),
        ),
        passed="no evidence of bias in the most recent errors",
        found=_tracking_found,
        meaning=(
            "the forecasts have drifted recently; look for a level shift or a change the "
            "model has not caught up with"
        ),
        options=(
            Option("min_obs"),
            Option("window", minimum=2),
            *_MATERIALITY,
        ),
        material=_tracking_material,
        pass_notes=_tracking_notes,
    ),
)
