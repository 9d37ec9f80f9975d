"""Residual autocorrelation: the Ljung-Box portmanteau test, Box-Pierce alongside."""

from __future__ import annotations

from typing import Any

import numpy as np

from ..batch import Residuals
from ..registry import CheckDef, CheckInputs, CheckPolicy, Finding, Option, fmt
from ..results import CheckResult, skip_reasons_and_ran
from ..tails import chi2_sf
from ..types import FloatMatrix, FloatVector, InputError, IntVector

NONSEASONAL_LAGS = 10


def portmanteau_lags(n_obs: IntVector, season_length: int) -> IntVector:
    """Lag rule (common practice, a rule of thumb with no single source): 10 lags for
    non-seasonal data, ``2 m`` for seasonal period ``m``, at most ``floor(T / 5)``.

    ``T = 104, m = 1`` gives 10; ``T = 156, m = 52`` gives 31; ``T = 40, m = 1`` gives 8.
    """
    base = NONSEASONAL_LAGS if season_length <= 1 else 2 * season_length
    return np.minimum(base, np.asarray(n_obs) // 5).astype(np.int64)


def autocorrelations(res: Residuals, max_lag: int) -> FloatMatrix:
    """Sample autocorrelations ``r_1..r_max_lag`` per series (shape ``(n, max_lag)``).

    ``r_k = gamma_k / gamma_0`` with the autocovariances of
    :meth:`Residuals.autocovariances` (observed pairs, divided by ``n_obs``): statsmodels'
    ``acf(x, adjusted=False, missing="conservative")``.
    """
    gamma = res.standard_autocovariances(max_lag)  # the ratio does not depend on the unit
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        return gamma[:, 1:] / gamma[:, :1]


def portmanteau_q(
    r: FloatMatrix, n_obs: IntVector, lags: IntVector
) -> tuple[FloatVector, FloatVector]:
    """Ljung-Box and Box-Pierce statistics from autocorrelations ``r[:, k - 1] = r_k``.

    ``Q = T (T + 2) sum_{k=1..L} r_k^2 / (T - k)`` and ``Q_BP = T sum_{k=1..L} r_k^2`` with
    ``T = n_obs`` and ``L = lags`` per row (columns past ``L`` are ignored). From the NIST/SEMATECH
    e-Handbook's Series F (``T = 70``, ``r_1 = -0.389878319``), ``Q(1) = 11.103``.
    """
    r = np.atleast_2d(np.asarray(r, dtype=float))
    n = np.asarray(n_obs, dtype=float).reshape(-1)
    lags = np.asarray(lags).reshape(-1)
    k = np.arange(1, r.shape[1] + 1)[None, :]
    within = k <= lags[:, None]
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        lb_terms = np.where(within, r * r / (n[:, None] - k), 0.0)
        bp_terms = np.where(within, r * r, 0.0)
    return n * (n + 2.0) * lb_terms.sum(axis=1), n * bp_terms.sum(axis=1)


def ljung_box(
    res: Residuals,
    *,
    season_length: int = 1,
    model_params: int = 0,
    lags: int | None = None,
    min_obs: int = 0,
) -> CheckResult:
    """Ljung-Box test of no autocorrelation up to lag ``L`` (Ljung & Box 1978).

    ``Q = T (T + 2) sum_{k=1..L} r_k^2 / (T - k)`` with ``T = n_obs``, referred to chi-square
    with ``df = L - model_params``; Box-Pierce ``Q_BP = T sum r_k^2`` (Box & Pierce 1970) is
    reported in ``details`` with its p-value on the same ``df``. ``L`` follows
    :func:`portmanteau_lags` unless ``lags`` is given (still capped at ``T - 1``).
    Matches statsmodels' ``acorr_ljungbox(x, lags=[L], model_df=model_params, boxpierce=True)``.

    Skipped when ``df <= 0`` (too few lags for the parameters estimated), when the series is
    too short for one lag, or when the residuals are constant (no autocorrelation is defined).
    """
    if model_params < 0:
        raise InputError("model_params", f"must be 0 or more, got {model_params}")
    if lags is not None and lags < 1:
        raise InputError("lags", f"must be at least 1, got {lags}")
    n = res.n_obs
    used = portmanteau_lags(n, season_length) if lags is None else np.full(n.shape, lags)
    used = np.minimum(np.maximum(used, 0), np.maximum(n - 1, 0)).astype(np.int64)
    max_lag = int(used.max(initial=0))
    df = used - model_params
    reasons, ran = skip_reasons_and_ran(
        n.shape[0],
        (n < max(min_obs, 2), f"fewer than {max(min_obs, 2)} residuals"),
        (used < 1, "too short for one lag (the lag rule allows at most T/5)"),
        (df <= 0, f"no degrees of freedom left: lags minus {model_params} model parameters <= 0"),
        (res.constant, "residuals are constant, so autocorrelation is undefined"),
    )
    if max_lag >= 1:
        r = autocorrelations(res, max_lag)
        q, q_bp = portmanteau_q(r, n, used)
        r1 = r[:, 0]
    else:
        q = q_bp = r1 = np.full(n.shape, np.nan)
    safe_df = np.maximum(df, 1)
    q = np.where(ran, q, np.nan)
    q_bp = np.where(ran, q_bp, np.nan)
    return CheckResult(
        name="ljung_box",
        kind="test",
        statistic=q,
        p_value=chi2_sf(q, safe_df),
        details={
            "lags": used,
            "df": df,
            "box_pierce": q_bp,
            "box_pierce_p_value": chi2_sf(q_bp, safe_df),
            "acf_lag1": np.where(ran, r1, np.nan),
        },
        skip_reason=reasons,
        null_hypothesis="the residuals are not autocorrelated up to the tested lag",
    )


# ------------------------------------------------------------------------------- declarations


def _run_ljung_box(inputs: CheckInputs, **options: Any) -> CheckResult:
    batch = inputs.batch
    return ljung_box(
        inputs.residuals,
        season_length=batch.season_length,
        model_params=batch.model_params,
        **options,
    )


def _ljung_box_found(f: Finding) -> str:
    return (
        f"residuals are autocorrelated (Ljung-Box Q = {fmt(f.statistic)} on "
        f"{int(f.detail('lags'))} lags, df {int(f.detail('df'))}, {f.p_text()}; lag-1 "
        f"autocorrelation {fmt(float(f.detail('acf_lag1')), 2)})"
    )


CHECKS = (
    CheckDef(
        name="ljung_box",
        title="Ljung-Box autocorrelation",
        kind="test",
        position=40,
        family="autocorrelation",
        needs_holdout=False,
        tests="residual autocorrelation up to lag L, portmanteau test",
        null_hypothesis="the residuals are not autocorrelated up to the tested lag",
        defaults=(
            "L = 10 non-seasonal, 2m seasonal, at most T/5 (common practice); df = L - model_params"
        ),
        details=("lags", "df", "box_pierce", "box_pierce_p_value", "acf_lag1"),
        source="Ljung & Box (1978), Biometrika 65:297-303; Box & Pierce (1970), JASA 65:1509-1526",
        run=_run_ljung_box,
        # Essential: warn at adjusted p < 0.05, fail at < 0.01 (this project's choice).
        rule=CheckPolicy(warn_p=0.05, fail_p=0.01),
        passed="no evidence of autocorrelation left in the residuals",
        found=_ljung_box_found,
        meaning="structure is left unexplained; add the missing lags or seasonal terms",
        options=(Option("min_obs"), Option("lags", minimum=1)),
    ),
)
