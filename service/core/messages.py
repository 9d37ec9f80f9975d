"""Sentences for reasons: what was found, with its numbers, what it means and what to do."""

from __future__ import annotations

import math

import numpy as np

from .catalogue import SPECS
from .results import CheckResult

_WARN, _FAIL = 2, 3

_PASS = {
    "data_sufficiency": "enough usable residuals for the checks",
    "bias": "no evidence that the mean residual differs from zero",
    "tracking_signal": "no evidence of bias in the most recent errors",
    "ljung_box": "no evidence of autocorrelation left in the residuals",
    "arch_lm": "no evidence that the residual variance changes over time",
    "jarque_bera": "no evidence against normal residuals",
    "mase": "holdout accuracy within the policy's MASE bound",
    "benchmark_skill": "beats the simple benchmarks on the holdout",
    "interval_coverage": "holdout intervals cover at a rate consistent with their level",
}

_MEANING = {
    "data_sufficiency": "the other checks have little power or were skipped; supply a longer "
    "history or fill the gaps in the fitted values",
    "bias": "look for a missing level, trend or calendar term before shipping",
    "tracking_signal": "the forecasts have drifted recently; look for a level shift or a change "
    "the model has not caught up with",
    "ljung_box": "structure is left unexplained; add the missing lags or seasonal terms",
    "arch_lm": "prediction intervals will be too narrow in volatile periods and too wide in calm "
    "ones; model the variance or transform the series",
    "jarque_bera": "intervals that assume normal errors may be off; prefer bootstrapped intervals",
    "mase": "the forecasts are less accurate than the policy allows",
    "benchmark_skill": "a method that needs no model does better; do not ship this version "
    "for these series",
    "interval_coverage": "the stated interval level cannot be trusted",
}


def pass_message(name: str) -> str:
    """The short sentence for a check that passed."""
    return _PASS[name]


def _g(x: float, digits: int = 3) -> str:
    if x is None or (isinstance(x, float) and math.isnan(x)):
        return "n/a"
    if isinstance(x, float) and math.isinf(x):
        return "inf" if x > 0 else "-inf"
    return f"{x:.{digits}g}"


def _p(result: CheckResult, p_adj: np.ndarray, i: int) -> str:
    raw = float(result.p_value[i])
    adj = float(p_adj[i])
    if math.isnan(adj):
        return f"p = {_g(raw, 2)}"
    return f"p = {_g(raw, 2)}, adjusted across series {_g(adj, 2)}"


def series_message(name: str, i: int, code: int, result: CheckResult, p_adj: np.ndarray) -> str:
    """The reason sentence for check ``name`` on series ``i`` (status ``code``: warn or fail)."""
    d = {k: v[i] for k, v in result.details.items()}
    stat = float(result.statistic[i])
    if name == "data_sufficiency":
        found = (
            f"only {int(d['n_obs'])} usable residuals ({int(d['n_missing'])} missing inside "
            "the span)"
        )
    elif name == "bias":
        me = float(d["mean_error"])
        side = "low" if me > 0 else "high"
        pct = float(d["percent_bias"])
        pct_txt = "" if math.isnan(pct) else f", {pct:+.2f}% of the level"
        found = (
            f"residuals average {me:+.4g} (95% CI {_g(float(d['ci_low']), 4)} to "
            f"{_g(float(d['ci_high']), 4)}{pct_txt}; t = {_g(stat)}, {_p(result, p_adj, i)}, "
            f"{int(d['hac_lags'])} Newey-West lags): the forecasts run {side}; adding "
            f"{me:+.4g} to them would remove the bias"
        )
    elif name == "tracking_signal":
        total = float(d["sum_error"])
        side = "low" if total > 0 else "high"
        found = (
            f"the last {int(d['window'])} errors sum to {total:+.4g} (tracking signal "
            f"{_g(stat)}, {_p(result, p_adj, i)}): recently the forecasts run {side}"
        )
    elif name == "ljung_box":
        found = (
            f"residuals are autocorrelated (Ljung-Box Q = {_g(stat)} on {int(d['lags'])} "
            f"lags, df {int(d['df'])}, {_p(result, p_adj, i)}; lag-1 autocorrelation "
            f"{_g(float(d['acf_lag1']), 2)})"
        )
    elif name == "arch_lm":
        found = (
            f"residual variance is not constant (Engle LM = {_g(stat)} on {int(d['lags'])} "
            f"lags, {_p(result, p_adj, i)})"
        )
    elif name == "jarque_bera":
        found = (
            f"residuals are not normal (Jarque-Bera = {_g(stat)}, skewness "
            f"{_g(float(d['skewness']), 2)}, kurtosis {_g(float(d['kurtosis']), 3)}, "
            f"{_p(result, p_adj, i)})"
        )
    elif name == "mase":
        found = (
            f"holdout MASE is {_g(stat)} over {int(d['horizon'])} steps: the holdout MAE "
            f"{_g(float(d['mae']), 4)} is {_g(stat, 2)} times the in-sample "
            f"{'seasonal ' if int(d['season_length']) > 1 else ''}naive MAE "
            f"{_g(float(d['scale']), 4)}"
        )
    elif name == "benchmark_skill":
        found = (
            f"the {str(d['best_benchmark']).replace('_', ' ')} benchmark beats the model on "
            f"the holdout (skill {_g(stat, 2)}: RMSE {_g(float(d['rmse_model']), 4)} against "
            f"{_g(float(d['rmse_best']), 4)})"
        )
    elif name == "interval_coverage":
        cov, level = float(d["coverage"]), float(d["level"])
        kind = "too narrow" if cov < level else "too wide"
        found = (
            f"{level:.0%} intervals covered {cov:.0%} of {int(d['n_scored'])} holdout steps "
            f"({int(d['misses_below'])} below, {int(d['misses_above'])} above; Kupiec LR = "
            f"{_g(stat)}, {_p(result, p_adj, i)}): they are {kind}"
        )
    else:  # pragma: no cover - every catalogue check is handled above
        found = f"{name} = {_g(stat)}"
    return f"{found}; {_MEANING[name]}."


def fleet_message(
    name: str,
    code: int,
    failed: int,
    warned: int,
    tested: int,
    failed_share: float,
    warned_share: float,
    fail_share: float,
    warn_share: float,
    critical: bool,
) -> str:
    """The fleet-level sentence for one check."""
    title = SPECS[name].title
    if tested == 0:
        return f"{title}: no series could be tested."
    head = (
        f"{title}: {failed} of {tested} series fail and {warned} warn "
        f"({failed_share:.1%} of the weight fails, {warned_share:.1%} warns)"
    )
    if code >= _FAIL:
        why = (
            " including a critical series"
            if critical and failed_share <= fail_share
            else f", above the fail share of {fail_share:.1%}"
        )
        return f"{head}{why}; {_MEANING[name]}."
    if code >= _WARN:
        why = (
            " including a critical series"
            if critical and failed_share + warned_share <= warn_share
            else f", above the warn share of {warn_share:.1%}"
        )
        return f"{head}{why}; {_MEANING[name]}."
    return f"{head}; within the policy's shares."
