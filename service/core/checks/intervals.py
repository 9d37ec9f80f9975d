"""Holdout prediction intervals: coverage (Kupiec's test) and the interval (Winkler) score."""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import numpy as np

from ..batch import SeriesBatch
from ..coverage_tests import (
    coverage_counts,
    fleet_coverage_from_counts,
    kupiec_lr,
    miss_dependence,
)
from ..fleet_parts import FleetPart
from ..registry import (
    FAIL,
    WARN,
    CheckDef,
    CheckInputs,
    CheckPolicy,
    Finding,
    FleetFinding,
    FleetTest,
    Option,
    fmt,
)
from ..results import CheckResult, is_none, skip_reasons_and_ran, to_python
from ..tails import chi2_sf, t_sf
from ..types import FloatMatrix, FloatVector

if TYPE_CHECKING:
    from ..policy import Policy
    from ..runner import BatchChecks


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


def _run(inputs: CheckInputs, **options: Any) -> CheckResult:
    """Kupiec's test with Christoffersen's (1998) independence test of the misses beside it
    (``independence_lr``, ``independence_p_value``; information only on a one-origin path,
    where a correct model's misses are dependent whenever its errors are)."""
    batch = inputs.batch
    result = interval_coverage(batch, **options)
    dep = miss_dependence(batch)
    ok = is_none(dep.skip_reason) & ~result.skipped
    details = dict(result.details)
    details["independence_lr"] = np.where(ok, dep.lr_ind, np.nan)
    details["independence_p_value"] = np.where(ok, dep.p_ind, np.nan)
    return CheckResult(
        name=result.name,
        kind=result.kind,
        statistic=result.statistic,
        p_value=result.p_value,
        details=details,
        skip_reason=result.skip_reason,
        null_hypothesis=result.null_hypothesis,
    )


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


MIN_SHORTFALL = 0.02
"""Default smallest coverage shortfall that matters: intervals that miss 2 points more often
than they claim (93% coverage for 95% intervals) start to mislead the plans built on them."""


@dataclass(frozen=True)
class FleetCoverageSummary:
    """The fleet's pooled coverage (the result's ``fleet.coverage``): the weighted miss rate
    over every scored step, the nominal rate, their difference with its 95% interval
    (cluster-robust over series), the one-sided p-value that the intervals miss more often
    than they claim, the series and steps used, and ``material``."""

    miss_rate: float
    nominal: float
    excess: float
    ci_low: float
    ci_high: float
    p_value: float
    series_used: int
    steps: int
    material: bool | None

    def to_dict(self) -> dict[str, Any]:
        return {k: to_python(v) for k, v in vars(self).items()}


_NO_FLEET = FleetCoverageSummary(*(float("nan"),) * 6, 0, 0, None)


def _gather(checks: BatchChecks, weights: np.ndarray, policy: Policy) -> FleetPart:
    t, x, a = coverage_counts(checks.batch)
    return FleetPart(rows={"scored": t, "misses": x, "nominal": a})


def _fleet(
    part: FleetPart, checks: BatchChecks, weights: np.ndarray, policy: Policy
) -> FleetFinding:
    cp = policy.check("interval_coverage")
    rows = part.rows
    found = fleet_coverage_from_counts(rows["scored"], rows["misses"], rows["nominal"])
    if found.n_series < 2 or not np.isfinite(found.statistic):
        return FleetFinding(_NO_FLEET)
    p = float(t_sf(np.array(found.statistic), float(found.df)))
    shortfall = cp.option("min_shortfall")
    material = bool(found.excess >= (0.0 if shortfall is None else float(shortfall)))
    summary = FleetCoverageSummary(
        miss_rate=found.miss_rate,
        nominal=found.nominal,
        excess=found.excess,
        ci_low=found.ci_low,
        ci_high=found.ci_high,
        p_value=p,
        series_used=found.n_series,
        steps=found.n_steps,
        material=material,
    )
    message = (
        f"Across the fleet the intervals miss {found.miss_rate:.1%} of {found.n_steps:,} "
        f"holdout steps against the {found.nominal:.1%} they claim ({found.n_series:,} series; "
        f"excess 95% CI {found.ci_low:+.1%} to {found.ci_high:+.1%}, p = {p:.2g}, misses along "
        "one path allowed to cluster): they are too narrow; widen them or model the variance."
    )
    return FleetFinding(
        summary, p_value=p, material=material, message=message, warn_p=cp.fleet_warn_p
    )


CHECKS = (
    CheckDef(
        name="interval_coverage",
        title="Interval coverage",
        kind="test",
        position=90,
        family="intervals",
        needs_holdout=True,
        tests=(
            "holdout interval coverage against the nominal level (Kupiec POF test); the "
            "fleet's pooled miss rate"
        ),
        null_hypothesis="the intervals miss at their nominal rate 1 - level",
        defaults=(
            "level 0.95 unless given; series warn only (misses along one path cluster); the "
            "fleet's pooled test fails beyond a 2-point shortfall; Winkler score and "
            "Christoffersen's independence test reported"
        ),
        details=(
            "coverage",
            "level",
            "misses",
            "misses_below",
            "misses_above",
            "n_scored",
            "winkler_score",
            "independence_lr",
            "independence_p_value",
        ),
        source=(
            "Kupiec (1995), J. Derivatives 3:73-84; Christoffersen (1998), IER 39:841-862; "
            "Winkler (1972), JASA 67:187-191; cluster-robust pooling (Cameron & Miller 2015)"
        ),
        run=_run,
        rule=CheckPolicy(
            warn_p=0.05,
            fleet_warn_p=0.05,
            fleet_fail_p=0.01,
            option_values=(("min_shortfall", MIN_SHORTFALL),),
        ),
        passed="holdout intervals cover at a rate consistent with their level",
        found=_coverage_found,
        meaning="the stated interval level cannot be trusted",
        options=(
            Option("min_obs"),
            Option("min_shortfall", kind="float", maximum=1, for_runner=False),
        ),
        cap=_too_wide_only_warns,
        fleet=FleetTest(
            key="coverage", gather=_gather, finish=_fleet, empty=FleetFinding(_NO_FLEET)
        ),
    ),
)
