"""Bias over the holdout: is the mean forecast error along the path zero, per series and over
the fleet?

Errors along one forecast path are correlated (an h-step error shares the innovations of the
steps before it), so the variance of their mean is not ``s^2 / H``. Two ways to allow for it,
chosen by ``method``:

* ``"ewc"`` (default): the equal-weighted cosine estimator with ``B`` terms, Student's t with
  ``B`` degrees of freedom (fixed-b);
* ``"newey_west"``: Bartlett-weighted autocovariances up to a small lag ``L``, Student's t with
  ``n - 1`` degrees of freedom.

``tests/perf/RESULTS_holdout_tests.md`` measures their size and power on one-origin paths, with
a third candidate, a variance read off the prediction intervals, left out: taken as the bound
for fully correlated errors it keeps its level but has next to no power; taken with
independent errors it over-rejects for autocorrelated series. Newey-West with a small lag
over-rejects too; EWC comes closest to its level (about 7% at 5% for AR(1) errors). No
variance from one path holds for random-walk-like errors (EWC rejects a correct random-walk
forecast 16-34% of the time at 5% for H = 12, 24), so the per-series test is weak evidence;
:func:`fleet_holdout_bias`, whose variance comes from the spread across series, keeps its level
in every case measured.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.special import stdtr

from .batch import Residuals, SeriesBatch, nearly_constant
from .fleet_pooling import PooledMean, pooled_mean
from .holdout import holdout_pairs
from .path_variance import autocovariances, bartlett_long_run, centred, ewc_degrees, ewc_long_run
from .results import skip_reasons_and_ran
from .types import FloatMatrix, FloatVector, InputError, IntVector, ObjectVector

BIAS_METHODS = ("ewc", "newey_west")
DEFAULT_BIAS_METHOD = "ewc"
DEFAULT_PATH_LAGS = 1
HOLDOUT_BIAS_MIN_OBS = 3


@dataclass(frozen=True, eq=False)
class PathBias:
    """Holdout bias per series (arrays of length ``n_series``).

    Attributes
    ----------
    statistic : ndarray
        ``mean_error / std_error`` (``NaN`` where skipped).
    p_value : ndarray
        Two-sided, from the reference distribution of ``method``.
    mean_error : ndarray
        Mean of ``actual - forecast`` over the scored steps: ``> 0``, the forecasts run low.
    percent_bias : ndarray
        ``100 mean_error / mean |actual|`` over the same steps.
    std_error : ndarray
        Standard error of ``mean_error``.
    df : ndarray
        Degrees of freedom of the t reference.
    n_obs : ndarray of int
        Scored steps.
    method : str
    skip_reason : ndarray of object
    """

    statistic: FloatVector
    p_value: FloatVector
    mean_error: FloatVector
    percent_bias: FloatVector
    std_error: FloatVector
    df: FloatVector
    n_obs: IntVector
    method: str
    skip_reason: ObjectVector


def path_bias(
    errors: FloatMatrix,
    *,
    method: str = DEFAULT_BIAS_METHOD,
    lags: int | None = None,
    b: int | None = None,
    actuals: FloatMatrix | None = None,
    min_obs: int = HOLDOUT_BIAS_MIN_OBS,
) -> PathBias:
    """Test of a zero mean error along each row's holdout path.

    ``t = ebar / SE`` over the ``n`` observed steps, with by ``method``:

    * ``"ewc"`` (default): ``SE^2 = Omega_EWC / n`` with ``B = b`` cosine terms (default
      :func:`~service.core.path_variance.ewc_degrees`, ``max(1, floor(0.4 n^(2/3)))``;
      Lazarus, Lu, Stock & Stock 2018), capped at ``n - 1``, p-value from Student's t with
      ``B`` df;
    * ``"newey_west"``: ``SE^2 = (gamma_0 + 2 sum_{j=1}^{L} (1 - j/(L+1)) gamma_j) / n``
      (autocovariances over observed pairs, divided by ``n``; Newey & West 1987), ``L = lags``
      (default 1, clamped to ``n - 1``), p-value from Student's t with ``n - 1`` df.

    ``percent_bias = 100 ebar / mean |actual|`` over the scored steps needs ``actuals`` (else
    ``NaN``). Errors are divided by the row's largest ``|error|`` first (no overflow).
    Constant non-zero errors are biased for certain (``t = +-inf``, ``p = 0``), the rule of
    :func:`~service.core.checks.bias.bias`; skipped: fewer than ``min_obs`` (at least 2) steps, or
    all-zero errors.

    Errors 1, -1, 2, 0, 3, 1 (mean 1), ``"newey_west"`` with ``L = 1``: ``gamma_0 = 5/3``,
    ``gamma_1 = -5/6``, ``SE^2 = (5/3 - 5/6) / 6 = 5/36``, ``t = 6 / sqrt(5) = 2.683282``,
    ``p = 0.043648`` (t with 5 df).
    """
    if method not in BIAS_METHODS:
        raise InputError("method", f"must be one of {', '.join(BIAS_METHODS)}, got {method!r}")
    if lags is not None and lags < 0:
        raise InputError("lags", f"must be 0 or more, got {lags}")
    if b is not None and b < 1:
        raise InputError("b", f"must be at least 1, got {b}")
    e = np.asarray(errors, dtype=float)
    observed = ~np.isnan(e)
    n = observed.sum(axis=1)
    rows = e.shape[0]
    unit = np.where(observed, np.abs(e), 0.0).max(axis=1, initial=0.0)
    unit = np.where(unit > 0, unit, 1.0)
    s = np.where(observed, e, 0.0) / unit[:, None]
    z, mean_s = centred(s, observed)
    if method == "newey_west":
        lag = np.full(rows, DEFAULT_PATH_LAGS if lags is None else int(lags))
        lag = np.minimum(lag, np.maximum(n - 1, 0))
        gamma = autocovariances(z, n, int(lag.max(initial=0)))
        with np.errstate(invalid="ignore", divide="ignore"):
            var_s = bartlett_long_run(gamma, lag) / n
        df = np.maximum(n - 1, 1).astype(float)
    else:
        bb = ewc_degrees(n) if b is None else np.full(rows, int(b))
        bb = np.clip(bb, 1, np.maximum(n - 1, 1))
        with np.errstate(invalid="ignore", divide="ignore"):
            var_s = ewc_long_run(z, observed, n, bb) / n
        df = bb.astype(float)
    constant = nearly_constant(e, observed)
    zero = constant & ~(np.abs(mean_s) > 0)
    need = max(min_obs, 2)
    reasons, ran = skip_reasons_and_ran(
        rows,
        (n < need, f"fewer than {need} holdout steps"),
        (zero, "holdout errors are all zero"),
    )
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        se_s = np.where(constant, 0.0, np.sqrt(np.maximum(var_s, 0.0)))
        t = np.where(se_s > 0, mean_s / se_s, np.sign(mean_s) * np.inf)
        p = 2.0 * stdtr(df, -np.abs(t))
        mean_e = mean_s * unit
        se = se_s * unit
        pct = np.full(rows, np.nan)
        if actuals is not None:
            y = np.asarray(actuals, dtype=float)
            scale = np.where(observed, np.abs(y), 0.0).sum(axis=1) / n
            pct = 100.0 * mean_e / scale
    return PathBias(
        statistic=np.where(ran, t, np.nan),
        p_value=np.where(ran, p, np.nan),
        mean_error=np.where(ran, mean_e, np.nan),
        percent_bias=np.where(ran & np.isfinite(pct), pct, np.nan),
        std_error=np.where(ran, se, np.nan),
        df=np.where(ran, df, np.nan),
        n_obs=n,
        method=method,
        skip_reason=reasons,
    )


def holdout_bias(
    batch: SeriesBatch,
    *,
    method: str = DEFAULT_BIAS_METHOD,
    lags: int | None = None,
    b: int | None = None,
    min_obs: int = HOLDOUT_BIAS_MIN_OBS,
) -> PathBias:
    """:func:`path_bias` of the batch's holdout errors ``actual - forecast``, with percent bias
    relative to the holdout actuals."""
    err, _, _ = holdout_pairs(batch)
    actuals = None if batch.holdout is None else batch.holdout.actuals
    return path_bias(err, method=method, lags=lags, b=b, actuals=actuals, min_obs=min_obs)


@dataclass(frozen=True, eq=False)
class FleetBias:
    """The fleet's pooled holdout bias.

    ``pooled`` is the weighted mean of the standardised mean errors with its test against 0;
    ``standardised`` holds them per series (``NaN`` where not used), ``scale`` the
    standardising scale and ``weights`` the weights.
    """

    pooled: PooledMean
    standardised: FloatVector
    scale: FloatVector
    weights: FloatVector


def training_rms(batch: SeriesBatch, residuals: Residuals | None = None) -> FloatVector:
    """Root mean square of the training residuals ``actual - fitted`` per series (observed
    residuals only; ``NaN`` without any): the unit the pooled bias measures errors in.
    ``residuals``: the batch's own (:func:`~service.core.batch.residuals_of`), whose sums of
    squares other checks may have taken already."""
    if residuals is not None:
        top, sums = residuals.square_sums
        peak = np.where(top > 0, top, 1.0)
        count = residuals.n_obs
        with np.errstate(invalid="ignore", divide="ignore"):
            return np.where(count > 0, peak * np.sqrt(sums / count), np.nan)
    e = batch.actuals - batch.fitted
    ok = ~np.isnan(e)
    count = ok.sum(axis=1)
    peak = np.where(ok, np.abs(e), 0.0).max(axis=1, initial=0.0)
    peak = np.where(peak > 0, peak, 1.0)
    s = np.where(ok, e, 0.0) / peak[:, None]
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(count > 0, peak * np.sqrt((s * s).sum(axis=1) / count), np.nan)


def fleet_holdout_bias(
    batch: SeriesBatch,
    *,
    scale: FloatVector | None = None,
    weights: FloatVector | None = None,
    level: float = 0.95,
) -> FleetBias:
    """Pooled holdout bias over the fleet.

    Per series ``u_i = ebar_i / s_i``, the mean holdout error in units of ``s_i`` (default
    :func:`training_rms`, the in-sample residuals' root mean square: known before the holdout,
    so under "no bias" ``u_i`` has mean 0 whatever the scale). The fleet's value is the
    weighted mean of ``u_i`` with weights ``n_i`` (scored holdout steps) unless ``weights``
    are given, tested against 0 by :func:`~service.core.fleet_pooling.pooled_mean`: HC1
    variance across series, t with ``G - 1`` df. The variance comes from the spread of the
    ``u_i`` across series, so the correlation of errors along each path is allowed for in
    full; series are taken as independent (a shock common to many series in the holdout is
    not). Series without a holdout step or a positive finite scale are left out.
    """
    err, ok, n = holdout_pairs(batch)
    s = training_rms(batch) if scale is None else np.asarray(scale, dtype=float)
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        peak = np.where(ok, np.abs(err), 0.0).max(axis=1, initial=0.0)
        peak = np.where(peak > 0, peak, 1.0)
        mean = np.where(ok, err / peak[:, None], 0.0).sum(axis=1) / n
        u = mean * (peak / s)
    use = (n > 0) & np.isfinite(u) & (s > 0)
    w = n.astype(float) if weights is None else np.asarray(weights, dtype=float)
    u = np.where(use, u, np.nan)
    return FleetBias(
        pooled=pooled_mean(u, np.where(use, w, 0.0), level=level),
        standardised=u,
        scale=s,
        weights=w,
    )
