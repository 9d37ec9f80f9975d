"""Against the version in production: is the new version at least as accurate as its baseline
on the same holdout periods?

Runs only when the batch carries a baseline (``make_batch(..., baseline_forecasts=...)``); a
batch without one has no ``baseline_accuracy`` anywhere in its result.

* Per series, the Diebold-Mariano test of equal expected loss of the new version and the
  baseline on the matched holdout periods (both forecasts and the actual observed), with the
  Harvey, Leybourne & Newbold (1997) small-sample correction (:func:`~service.core.comparison
  .dm_test` with ``variance="acf"``), one-sided for "the new version is worse"; BH across
  series as for every test.
* For the fleet, the average relative MAE of the new version against the baseline (Davydenko &
  Fildes 2013; :func:`~service.core.relative_accuracy.avg_rel_mae`) with its 95% interval over
  series. The fleet fails when the relative MAE is significantly above ``1 + margin`` and warns
  when it is significantly above 1 (worse, though perhaps within the margin).
* Bias and interval coverage of both versions on the matched periods, side by side, in the
  series' details and the fleet's figures.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import numpy as np

from ..batch import SeriesBatch
from ..comparison import DM_EQUAL_LOSSES, DM_MIN_OBS, DM_VARIANCES, LOSSES, dm_test
from ..fleet_parts import FleetPart
from ..fleet_pooling import pooled_mean
from ..multiple import benjamini_hochberg_rows
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
from ..relative_accuracy import RelativeMae, avg_rel_mae, error_ratio
from ..results import CheckResult, skip_reasons_and_ran, to_python
from ..tails import t_sf
from ..types import FloatMatrix, InputError

if TYPE_CHECKING:
    from ..policy import Policy
    from ..runner import BatchChecks

MARGIN = 0.02
"""Default margin: the new version fails the fleet only when its average relative MAE is
significantly above 1.02 (README, "Against the version in production", says why)."""

NO_MATCH = "no holdout period with a baseline forecast"
_NONE = np.array(None, dtype=object)


@dataclass(frozen=True, eq=False)
class MatchedErrors:
    """The holdout errors of both versions on the matched periods (``NaN`` elsewhere): periods
    with the actual, the new forecast and the baseline forecast observed."""

    new: FloatMatrix
    baseline: FloatMatrix
    matched: np.ndarray
    count: np.ndarray


def matched_errors(batch: SeriesBatch) -> MatchedErrors:
    """The errors ``actual - forecast`` of the new version and of the baseline on the periods
    where both are scored. Without a holdout or a baseline, no period matches."""
    h, b = batch.holdout, batch.baseline
    if h is None or b is None:
        empty = np.zeros((batch.n_series, 0))
        return MatchedErrors(empty, empty, empty.astype(bool), np.zeros(batch.n_series, int))
    new = h.actuals - h.forecasts
    base = h.actuals - b.forecasts
    matched = ~(np.isnan(new) | np.isnan(base))
    return MatchedErrors(
        new=np.where(matched, new, np.nan),
        baseline=np.where(matched, base, np.nan),
        matched=matched,
        count=matched.sum(axis=1),
    )


def _coverage(
    y: FloatMatrix, lower: FloatMatrix | None, upper: FloatMatrix | None, scored: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """Per row: periods inside ``[lower, upper]`` and periods scored (``scored`` and both
    bounds observed); zeros without intervals."""
    if lower is None or upper is None:
        zero = np.zeros(y.shape[0], dtype=np.int64)
        return zero, zero
    ok = scored & ~(np.isnan(lower) | np.isnan(upper))
    inside = ok & (y >= lower) & (y <= upper)
    return inside.sum(axis=1), ok.sum(axis=1)


def _side_by_side(batch: SeriesBatch, m: MatchedErrors) -> dict[str, np.ndarray]:
    """Per series: mean error (bias) and interval coverage of each version on the matched
    periods (coverage over the matched periods where both versions have an interval), and
    the counts the fleet pools them from."""
    n = batch.n_series
    count = m.count.astype(float)
    with np.errstate(invalid="ignore", divide="ignore"):
        bias_new = np.nansum(m.new, axis=1) / count
        bias_base = np.nansum(m.baseline, axis=1) / count
    h, b = batch.holdout, batch.baseline
    if h is None or b is None or not m.matched.shape[1]:
        inside_new = inside_base = scored = np.zeros(n, dtype=np.int64)
    else:
        both = m.matched
        for lo, up in ((h.lower, h.upper), (b.lower, b.upper)):
            if lo is None or up is None:
                both = np.zeros_like(both)
            else:
                both = both & ~(np.isnan(lo) | np.isnan(up))
        inside_new, scored = _coverage(h.actuals, h.lower, h.upper, both)
        inside_base, _ = _coverage(h.actuals, b.lower, b.upper, both)
    with np.errstate(invalid="ignore", divide="ignore"):
        cov_new = np.where(scored > 0, inside_new / np.maximum(scored, 1), np.nan)
        cov_base = np.where(scored > 0, inside_base / np.maximum(scored, 1), np.nan)
    return {
        "bias_new": np.where(count > 0, bias_new, np.nan),
        "bias_baseline": np.where(count > 0, bias_base, np.nan),
        "coverage_new": cov_new,
        "coverage_baseline": cov_base,
        "inside_new": inside_new,
        "inside_baseline": inside_base,
        "interval_periods": scored,
    }


def baseline_accuracy(
    batch: SeriesBatch,
    *,
    loss: str = "squared",
    variance: str = "acf",
    h: int | None = None,
    min_obs: int = DM_MIN_OBS,
) -> CheckResult:
    """Is the new version significantly less accurate than its baseline on the holdout?

    On the ``n`` matched periods (:func:`matched_errors`), ``d_t = L(e_new,t) - L(e_base,t)``
    with ``L(e) = e^2`` (``loss="squared"``) or ``|e|`` (``"absolute"``). The Diebold & Mariano
    (1995) statistic ``DM = dbar / sqrt(V / n)``, ``V = gamma_0 + 2 sum_{k=1}^{h-1} gamma_k``
    (autocovariances of ``d`` divided by ``n``), times the Harvey, Leybourne & Newbold (1997,
    IJF 13:281-291, eq. 9) factor ``sqrt((n + 1 - 2h + h (h - 1) / n) / n)``, referred to
    Student's t with ``n - 1`` degrees of freedom; ``p_value = P(t_{n-1} >= DM*)`` (the new
    version is worse). ``h`` defaults to 1; ``variance="ewc"`` uses the equal-weighted cosine
    variance of :func:`~service.core.comparison.dm_test` instead (for strongly autocorrelated
    paths). Where the two versions' losses are equal at every matched period the series
    passes with ``DM* = 0``, ``p = 1``.

    ``details``: ``relative_error`` (RMSE ratio new / baseline for squared loss, MAE ratio for
    absolute), ``loss``, ``matched_periods``, ``mean_differential`` (``dbar`` in the loss's
    units), ``h``, and side by side on the matched periods the mean error of each version
    (``bias_new``, ``bias_baseline``) and each version's interval coverage over the matched
    periods where both have an interval (``coverage_new``, ``coverage_baseline``, ``NaN``
    without intervals; ``interval_periods`` counts them).

    Skipped without a holdout, without any matched period, or with fewer than ``min_obs``
    matched periods.
    """
    if loss not in LOSSES:
        raise InputError("loss", f"must be one of {', '.join(LOSSES)}, got {loss!r}")
    if variance not in DM_VARIANCES:
        raise InputError("variance", f"must be one of {', '.join(DM_VARIANCES)}, got {variance!r}")
    n = batch.n_series
    m = matched_errors(batch)
    side = _side_by_side(batch, m)
    if not m.matched.shape[1]:
        test_stat = p = mean_d = np.full(n, np.nan)
        h_used = np.zeros(n, dtype=np.int64)
        dm_reason = np.full(n, NO_MATCH, dtype=object)
    else:
        dm = dm_test(m.new, m.baseline, loss=loss, variance=variance, h=h, min_obs=min_obs)
        # Equal losses throughout: no evidence of a loss, so a pass (DM* = 0, p = 1).
        equal = np.equal(dm.skip_reason, DM_EQUAL_LOSSES)
        test_stat = np.where(equal, 0.0, dm.statistic)
        p = np.where(equal, 1.0, dm.p_worse)
        mean_d = np.where(equal, 0.0, dm.mean_differential)
        h_used = dm.h
        dm_reason = np.where(equal, _NONE, dm.skip_reason)
    first, _ = skip_reasons_and_ran(
        n,
        (np.full(n, batch.holdout is None), "no holdout"),
        (m.count == 0, NO_MATCH),
    )
    reasons = np.where(np.equal(first, _NONE), dm_reason, first)
    ran = np.equal(reasons, _NONE)
    relative = error_ratio(m.new, m.baseline, loss) if m.matched.shape[1] else np.full(n, np.nan)
    finite = ran & np.isfinite(relative)
    details = {
        "relative_error": np.where(finite, relative, np.nan),
        "loss": np.full(n, loss, dtype=object),
        "matched_periods": m.count,
        "mean_differential": np.where(ran, mean_d, np.nan),
        "h": np.where(ran, h_used, 0),
        **{k: side[k] for k in ("bias_new", "bias_baseline", "coverage_new", "coverage_baseline")},
        "interval_periods": side["interval_periods"],
    }
    return CheckResult(
        name="baseline_accuracy",
        kind="test",
        statistic=np.where(ran, test_stat, np.nan),
        p_value=np.where(ran, p, np.nan),
        details=details,
        skip_reason=reasons,
        null_hypothesis="the new version's expected holdout loss is no larger than the baseline's",
    )


# ------------------------------------------------------------------------------- declarations


def _label(batch: SeriesBatch) -> str:
    b = batch.baseline
    return "the baseline" if b is None or not b.label else f"version {b.label}"


def _run(inputs: CheckInputs, **options: Any) -> CheckResult:
    return baseline_accuracy(inputs.batch, **options)


def _found(f: Finding) -> str:
    rel = float(f.detail("relative_error"))
    kind = "RMSE" if f.detail("loss") == "squared" else "MAE"
    return (
        f"this version is less accurate than the baseline on the holdout: its {kind} is "
        f"{fmt(rel, 3)} times the baseline's over {int(f.detail('matched_periods'))} matched "
        f"periods (Diebold-Mariano-HLN t = {fmt(f.statistic)}, {f.p_text()})"
    )


def _margin(cp: CheckPolicy) -> float:
    value = cp.option("margin")
    return MARGIN if value is None else float(value)


def _material(result: CheckResult, cp: CheckPolicy) -> np.ndarray:
    with np.errstate(invalid="ignore"):
        return result.details["relative_error"] > 1.0 + _margin(cp)


def _notes(
    result: CheckResult, p_adj: np.ndarray, codes: np.ndarray, immaterial: np.ndarray
) -> dict[int, str]:
    return {
        i: (
            "significantly less accurate than the baseline, but by less than the policy's "
            f"margin (error {fmt(float(result.details['relative_error'][i]), 3)} times the "
            "baseline's), so it passes"
        )
        for i in np.flatnonzero(immaterial).tolist()
    }


@dataclass(frozen=True)
class FleetBaseline:
    """The fleet against its baseline (the result's ``fleet.baseline``): the baseline's name,
    the average relative MAE of the new version against it (Davydenko & Fildes 2013) with its
    95% interval over series, the one-sided p-values that it exceeds ``1 + margin``
    (``p_value``, the fail test) and 1 (``p_worse``, the warn test), the series and periods
    matched and used, the series significantly worse on their own (BH-adjusted p below the
    policy's ``fail_p`` and beyond the margin), and bias (pooled mean error, percent of the
    mean absolute actual) and interval coverage (pooled) of both versions on the matched
    periods, side by side."""

    baseline: str | None
    relative_mae: float
    ci_low: float
    ci_high: float
    p_value: float
    p_worse: float
    margin: float
    matched_series: int
    matched_periods: int
    series_used: int
    series_worse: int
    bias_new: float
    bias_baseline: float
    percent_bias_new: float
    percent_bias_baseline: float
    coverage_new: float
    coverage_baseline: float
    material: bool | None

    def to_dict(self) -> dict[str, Any]:
        return {k: to_python(v) for k, v in vars(self).items()}


_NAN = float("nan")
_NO_FLEET = FleetBaseline(None, *(_NAN,) * 6, 0, 0, 0, 0, *(_NAN,) * 6, None)


def _pooled(num: np.ndarray, den: np.ndarray) -> float:
    total = float(den.sum())
    return float(num.sum()) / total if total > 0 else _NAN


def _one_sided(estimate: float, se: float, null: float, df: float) -> float:
    """``P(t_df >= (estimate - null) / se)``; with no spread at all, 1 or 0 by the sign."""
    if not np.isfinite(se) or not se > 0:
        return 1.0 if estimate <= null else 0.0
    return float(t_sf(np.array((estimate - null) / se), df))


def _gather(checks: BatchChecks, weights: np.ndarray, policy: Policy) -> FleetPart:
    """Per series of one block: the log ratio of the versions' MAEs over the matched periods
    (``NaN`` where the check skipped it or the ratio is undefined) and its periods, and the
    sums the fleet pools (matched periods, errors, level, interval periods and hits)."""
    batch = checks.batch
    use = ~checks["baseline_accuracy"].skipped
    m = matched_errors(batch)
    r = avg_rel_mae(np.where(use[:, None], m.new, np.nan), m.baseline)
    side = _side_by_side(batch, m)
    actuals = batch.holdout.actuals if batch.holdout is not None else m.new
    rows = {
        "log_ratio": r.log_ratios,
        "steps": np.where(np.isfinite(r.log_ratios), r.weights, 0).astype(float),
        "count": m.count,
        "level": np.where(use[:, None] & m.matched, np.abs(actuals), 0.0).sum(axis=1),
        "new_sum": np.where(use[:, None], np.nan_to_num(m.new), 0.0).sum(axis=1),
        "base_sum": np.where(use[:, None], np.nan_to_num(m.baseline), 0.0).sum(axis=1),
        "scored": side["interval_periods"],
        "inside_new": side["inside_new"],
        "inside_baseline": side["inside_baseline"],
    }
    return FleetPart(rows=rows)


def _fleet(
    part: FleetPart, checks: BatchChecks, weights: np.ndarray, policy: Policy
) -> FleetFinding:
    batch = checks.batch
    cp = policy.check("baseline_accuracy")
    margin = _margin(cp)
    result = checks["baseline_accuracy"]
    use = ~result.skipped
    rows = part.rows
    pooled = pooled_mean(rows["log_ratio"], rows["steps"])
    if pooled.n_series < 2:
        return FleetFinding(_NO_FLEET)
    r = RelativeMae.of(pooled)
    p_fail = _one_sided(pooled.estimate, pooled.std_error, float(np.log1p(margin)), pooled.df)
    p_worse = _one_sided(pooled.estimate, pooled.std_error, 0.0, pooled.df)
    p_adj = benjamini_hochberg_rows(np.where(use, result.p_value, np.nan)[None, :])[0]
    fail_p = cp.fail_p if cp.fail_p is not None else 0.01
    with np.errstate(invalid="ignore"):
        worse = int((use & (p_adj < fail_p) & _material(result, cp)).sum())
    m_count = rows["count"]
    count = np.where(use, m_count, 0)
    level = rows["level"].sum()
    new_sum = rows["new_sum"].sum()
    base_sum = rows["base_sum"].sum()
    scored = np.where(use, rows["scored"], 0)
    side = {"inside_new": rows["inside_new"], "inside_baseline": rows["inside_baseline"]}
    summary = FleetBaseline(
        baseline=None if batch.baseline is None else batch.baseline.label,
        relative_mae=r.estimate,
        ci_low=r.ci_low,
        ci_high=r.ci_high,
        p_value=p_fail,
        p_worse=p_worse,
        margin=margin,
        matched_series=int((m_count > 0).sum()),
        matched_periods=int(m_count.sum()),
        series_used=r.n_series,
        series_worse=worse,
        bias_new=_pooled(np.array(new_sum), count),
        bias_baseline=_pooled(np.array(base_sum), count),
        percent_bias_new=float(100.0 * new_sum / level) if level > 0 else _NAN,
        percent_bias_baseline=float(100.0 * base_sum / level) if level > 0 else _NAN,
        coverage_new=_pooled(np.where(use, side["inside_new"], 0), scored),
        coverage_baseline=_pooled(np.where(use, side["inside_baseline"], 0), scored),
        material=bool(r.estimate > 1.0 + margin),
    )
    return FleetFinding(
        summary,
        p_value=p_fail,
        material=True,
        message=_fleet_message(summary, _label(batch), fail_p),
        warn_p=cp.fleet_warn_p,
        warn_p_value=p_worse,
    )


def _fleet_message(s: FleetBaseline, label: str, fail_p: float) -> str:
    more = 100.0 * (s.relative_mae - 1.0)
    worse = f"{s.series_worse:,} series {'is' if s.series_worse == 1 else 'are'}"
    if s.material:
        then = "do not ship this version until the loss is explained"
    else:
        then = (
            f"within the policy's {100 * s.margin:g}% margin, so a warning: check where it loses "
            "before shipping"
        )
    return (
        f"This version is {abs(more):.1f}% {'less' if more >= 0 else 'more'} accurate than "
        f"{label} on {s.series_used:,} matched series (relative MAE {s.relative_mae:.3f}, 95% "
        f"CI {s.ci_low:.3f}-{s.ci_high:.3f}; p = {s.p_value:.2g} that it exceeds "
        f"1 + {s.margin:g}, {s.p_worse:.2g} that it exceeds 1); {worse} significantly worse "
        f"on their own (BH-adjusted p < {fail_p:g}, beyond the margin): {then}."
    )


CHECKS = (
    CheckDef(
        name="baseline_accuracy",
        title="Accuracy against the baseline version",
        kind="test",
        position=82,
        family="benchmarks",
        needs_holdout=True,
        tests=(
            "holdout accuracy against the version in production on the matched periods: "
            "Diebold-Mariano test with the Harvey-Leybourne-Newbold correction per series; the "
            "fleet's average relative MAE with its interval; bias and coverage of both versions"
        ),
        null_hypothesis="the new version's expected holdout loss is no larger than the baseline's",
        defaults=(
            "only with a baseline; squared loss; HLN with h = 1 and t(n - 1); the fleet fails "
            "when its relative MAE is significantly above 1.02, warns when significantly above 1"
        ),
        details=(
            "relative_error",
            "loss",
            "matched_periods",
            "mean_differential",
            "bias_new",
            "bias_baseline",
            "coverage_new",
            "coverage_baseline",
        ),
        source=(
            "Diebold & Mariano (1995), JBES 13:253-263; Harvey, Leybourne & Newbold (1997), "
            "IJF 13:281-291; Davydenko & Fildes (2013), IJF 29:510-522; Benjamini & Hochberg "
            "(1995)"
        ),
        run=_run,
        rule=CheckPolicy(
            warn_p=0.05,
            fail_p=0.01,
            fleet_warn_p=0.05,
            fleet_fail_p=0.01,
            option_values=(("margin", MARGIN),),
        ),
        passed="not less accurate than the baseline on the matched holdout periods",
        found=_found,
        meaning="the version in production does better here; look at what changed before shipping",
        options=(
            Option("min_obs"),
            Option("loss", kind="choice", choices=LOSSES),
            Option("variance", kind="choice", choices=DM_VARIANCES),
            Option("h", minimum=1),
            Option("margin", kind="float", for_runner=False),
        ),
        material=_material,
        pass_notes=_notes,
        fleet=FleetTest(
            key="baseline", gather=_gather, finish=_fleet, empty=FleetFinding(_NO_FLEET)
        ),
        applies=lambda batch: batch.baseline is not None,
    ),
)
