"""Holdout prediction intervals: coverage (Kupiec's test) and the interval (Winkler) score."""

from __future__ import annotations

import numpy as np

from ..batch import SeriesBatch
from ..registry import FAIL, WARN, CheckDef, CheckPolicy, Finding, Option, fmt
from ..results import CheckResult, skip_reasons_and_ran
from ..tails import chi2_sf
from ..types import FloatMatrix, FloatVector


def _xlogy(x: np.ndarray, y: np.ndarray) -> np.ndarray:
    """``x log y`` with ``0 log 0 = 0``."""
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        return np.where(x == 0, 0.0, x * np.log(np.where(x == 0, 1.0, y)))


def kupiec_lr(misses: np.ndarray, n: np.ndarray, miss_rate: np.ndarray) -> FloatVector:
    """Kupiec's (1995) proportion-of-failures likelihood ratio.

    ``LR = -2 ln[(1-p)^(T-x) p^x] + 2 ln[(1-x/T)^(T-x) (x/T)^x]`` with ``0 ln 0 = 0``,
    chi-square with 1 degree of freedom. ``x = 6, T = 252, p = 0.01`` gives 3.49878.
    """
    x = np.asarray(misses, dtype=float)
    t = np.asarray(n, dtype=float)
    p = np.asarray(miss_rate, dtype=float)
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        phat = x / t
    null = _xlogy(t - x, 1.0 - p) + _xlogy(x, p)
    alt = _xlogy(t - x, 1.0 - phat) + _xlogy(x, phat)
    return np.maximum(2.0 * (alt - null), 0.0)


def winkler_scores(
    y: FloatMatrix, lower: FloatMatrix, upper: FloatMatrix, alpha: FloatVector | float
) -> FloatMatrix:
    """Interval score per step (Winkler 1972; Gneiting & Raftery 2007).

    ``(u - l) + (2 / alpha)(l - y)`` if ``y < l``, ``+ (2 / alpha)(y - u)`` if ``y > u``.
    With ``alpha = 0.2`` and ``[10, 20]``: ``y = 15`` scores 10, ``y = 25`` 60, ``y = 8`` 30.
    """
    a = np.asarray(alpha, dtype=float)
    if a.ndim == 1:
        a = a[:, None]
    penalty = (2.0 / a) * (np.maximum(lower - y, 0.0) + np.maximum(y - upper, 0.0))
    return (upper - lower) + penalty


def interval_coverage(batch: SeriesBatch, *, min_obs: int = 1) -> CheckResult:
    """Empirical coverage of the holdout intervals against their nominal level.

    ``x`` = holdout steps outside ``[lower, upper]`` out of ``T`` scored steps (actual and both
    bounds observed); Kupiec's LR (:func:`kupiec_lr`) tests a miss rate of ``1 - level``.
    ``details`` reports ``coverage = 1 - x / T``, ``level``, misses below and above, and the
    mean Winkler score with ``alpha = 1 - level``.

    Skipped when the series has no intervals or fewer than ``min_obs`` scored steps.
    """
    n = batch.n_series
    h = batch.holdout
    if h is None or h.lower is None or h.upper is None or h.level is None:
        reasons = np.full(n, "no holdout intervals", dtype=object)
        nan = np.full(n, np.nan)
        return CheckResult(
            name="interval_coverage",
            kind="test",
            statistic=nan,
            p_value=nan,
            details={"coverage": nan, "level": nan, "n_scored": np.zeros(n, dtype=np.int64)},
            skip_reason=reasons,
            null_hypothesis="the intervals miss at their nominal rate 1 - level",
        )
    y, lo, up, level = h.actuals, h.lower, h.upper, h.level
    ok = ~(np.isnan(y) | np.isnan(lo) | np.isnan(up))
    t = ok.sum(axis=1)
    below = (ok & (y < lo)).sum(axis=1)
    above = (ok & (y > up)).sum(axis=1)
    x = below + above
    miss_rate = 1.0 - level
    lr = kupiec_lr(x, t, miss_rate)
    scores = winkler_scores(
        np.where(ok, y, 0.0),
        np.where(ok, lo, 0.0),
        np.where(ok, up, 0.0),
        np.where(np.isnan(miss_rate), 1.0, miss_rate),
    )
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        coverage = 1.0 - x / t
        winkler = np.where(ok, scores, 0.0).sum(axis=1) / t
    reasons, ran = skip_reasons_and_ran(
        n,
        (np.isnan(level) | (t == 0), "no holdout intervals"),
        (t < min_obs, f"fewer than {min_obs} holdout steps with intervals"),
    )
    lr = np.where(ran, lr, np.nan)
    return CheckResult(
        name="interval_coverage",
        kind="test",
        statistic=lr,
        p_value=chi2_sf(lr, 1),
        details={
            "coverage": np.where(ran, coverage, np.nan),
            "level": level,
            "misses": np.where(ran, x, 0),
            "misses_below": np.where(ran, below, 0),
            "misses_above": np.where(ran, above, 0),
            "n_scored": t,
            "winkler_score": np.where(ran, winkler, np.nan),
            "df": np.full(n, 1),
        },
        skip_reason=reasons,
        null_hypothesis="the intervals miss at their nominal rate 1 - level",
    )


# ------------------------------------------------------------------------------- declarations


def _coverage_found(f: Finding) -> str:
    cov, level = float(f.detail("coverage")), float(f.detail("level"))
    kind = "too narrow" if cov < level else "too wide"
    return (
        f"{level:.0%} intervals covered {cov:.0%} of {int(f.detail('n_scored'))} holdout steps "
        f"({int(f.detail('misses_below'))} below, {int(f.detail('misses_above'))} above; "
        f"Kupiec LR = {fmt(f.statistic)}, {f.p_text()}): they are {kind}"
    )


def _too_wide_only_warns(result: CheckResult, codes: np.ndarray) -> np.ndarray:
    """Intervals too wide waste width but do not mislead: at most a warning."""
    too_wide = result.details["coverage"] > result.details["level"]
    return np.where(too_wide & (codes == FAIL), WARN, codes)


CHECKS = (
    CheckDef(
        name="interval_coverage",
        title="Interval coverage",
        kind="test",
        position=90,
        family="intervals",
        needs_holdout=True,
        tests="holdout interval coverage against the nominal level (Kupiec POF test)",
        null_hypothesis="the intervals miss at their nominal rate 1 - level",
        defaults="level 0.95 unless given; Winkler score reported",
        details=(
            "coverage",
            "level",
            "misses",
            "misses_below",
            "misses_above",
            "n_scored",
            "winkler_score",
        ),
        source="Kupiec (1995), J. Derivatives 3:73-84; Winkler (1972), JASA 67:187-191",
        run=lambda inputs, **options: interval_coverage(inputs.batch, **options),
        rule=CheckPolicy(warn_p=0.05, fail_p=0.01),
        passed="holdout intervals cover at a rate consistent with their level",
        found=_coverage_found,
        meaning="the stated interval level cannot be trusted",
        options=(Option("min_obs"),),
        cap=_too_wide_only_warns,
    ),
)
