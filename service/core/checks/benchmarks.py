"""Holdout skill over the simple benchmarks of :mod:`service.core.holdout`."""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import numpy as np

from ..batch import SeriesBatch
from ..comparison import DM_MIN_OBS, compare_with_benchmarks, holm
from ..fleet_parts import FleetPart
from ..fleet_pooling import pooled_mean
from ..holdout import BENCHMARKS, benchmark_forecasts, holdout_pairs, holdout_reason
from ..registry import CheckDef, CheckPolicy, Finding, FleetFinding, FleetTest, Option, fmt
from ..relative_accuracy import RelativeMae, error_ratio, fleet_avg_rel_mae
from ..results import NONE, CheckResult, is_none, skip_reasons_and_ran, to_python
from ..tails import t_sf
from ..types import FloatMatrix, InputError

if TYPE_CHECKING:
    from ..policy import Policy
    from ..runner import BatchChecks


def _rmse(err: FloatMatrix, ok: np.ndarray, count: np.ndarray) -> np.ndarray:
    """Root mean square of ``err`` where ``ok``, computed over the row's largest ``|err|`` so
    squares of large errors do not overflow."""
    peak = np.where(ok, np.abs(err), 0.0).max(axis=1, initial=0.0)
    peak = np.where(peak > 0, peak, 1.0)
    scaled = np.where(ok, err, 0.0) / peak[:, None]
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        return peak * np.sqrt((scaled * scaled).sum(axis=1) / count)


def skill_over_benchmarks(batch: SeriesBatch, *, min_obs: int = 1) -> CheckResult:
    """Skill over the best simple benchmark on the holdout (a descriptive figure).

    ``skill = 1 - RMSE(model) / RMSE(best)``, where ``best`` is the benchmark of
    :func:`benchmark_forecasts` with the lowest RMSE on the holdout steps the model is scored on
    (a benchmark undefined at any of those steps is left out). Below 0 the model loses to a
    method that needs no model at all.

    Skipped without a holdout, when no benchmark is defined at every scored step (no training
    actuals), or when the best benchmark is exact on the holdout (RMSE 0).
    """
    err, ok, count = holdout_pairs(batch)
    n = batch.n_series
    horizon = err.shape[1]
    names = [k for k in BENCHMARKS if k != "seasonal_naive" or batch.season_length > 1]
    if horizon == 0:
        # No holdout step in the whole batch: every series skips, with the same keys.
        nan = np.full(n, np.nan)
        return CheckResult(
            name="skill_over_benchmarks",
            kind="metric",
            statistic=nan,
            p_value=nan,
            details={
                "best_benchmark": np.full(n, None, dtype=object),
                "skill": nan,
                "rmse_model": nan,
                "rmse_best": nan,
                **{f"rmse_{name}": nan for name in names},
                "horizon": count,
            },
            skip_reason=np.full(n, holdout_reason(min_obs), dtype=object),
        )
    model_rmse = _rmse(err, ok, count)
    bench_rmse = np.full((n, len(names)), np.inf)
    details: dict[str, np.ndarray] = {}
    if horizon > 0 and batch.holdout is not None:
        forecasts = benchmark_forecasts(batch, horizon)
        for j, name in enumerate(names):
            b_err = batch.holdout.actuals - forecasts[name]
            undefined = (ok & np.isnan(b_err)).any(axis=1)
            rmse = _rmse(np.where(ok, b_err, 0.0), ok, count)
            bench_rmse[:, j] = np.where(undefined | (count == 0), np.inf, rmse)
    # The same keys whatever the batch holds, so a series' details never depend on the others.
    for j, name in enumerate(names):
        finite = np.isfinite(bench_rmse[:, j])
        details[f"rmse_{name}"] = np.where(finite, bench_rmse[:, j], np.nan)
    best_j = np.argmin(bench_rmse, axis=1)
    best = bench_rmse[np.arange(n), best_j]
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        skill = 1.0 - model_rmse / best
    reasons, ran = skip_reasons_and_ran(
        n,
        (count < max(min_obs, 1), holdout_reason(min_obs)),
        (~np.isfinite(best), "no benchmark could be fitted to the training actuals"),
        (best == 0, "a benchmark forecasts the holdout exactly, so skill is undefined"),
    )
    best_name = np.array(names, dtype=object)[best_j]
    return CheckResult(
        name="skill_over_benchmarks",
        kind="metric",
        statistic=np.where(ran, skill, np.nan),
        p_value=np.full(n, np.nan),
        details={
            "best_benchmark": np.where(ran, best_name, NONE),
            "skill": np.where(ran, skill, np.nan),
            "rmse_model": np.where(ran, model_rmse, np.nan),
            "rmse_best": np.where(ran, best, np.nan),
            **details,
            "horizon": count,
        },
        skip_reason=reasons,
    )


LOSSES = ("squared", "absolute")
MARGIN = 0.05
"""Default margin: a model whose errors are more than 5% larger than a no-model benchmark's
costs more than it gives; within it, a short holdout cannot tell the two apart reliably."""


def benchmark_skill(
    batch: SeriesBatch,
    *,
    loss: str = "squared",
    benchmarks: Sequence[str] | None = None,
    min_obs: int = DM_MIN_OBS,
) -> CheckResult:
    """Is the model significantly worse than a simple benchmark on the holdout?

    Per series and benchmark (mean, naive, seasonal naive, drift, fitted to the training
    actuals; ``benchmarks`` picks some), the Diebold-Mariano test of equal expected loss
    (``loss`` squared or absolute error) with the long-run variance of the loss differential
    along the path by the equal-weighted cosine estimator and Student t critical values (the
    fixed-smoothing form of Coroneo & Iacone 2020; the Harvey, Leybourne & Newbold 1997
    variance over ``h - 1`` autocovariances, the classical small-sample form, over-rejects on a
    one-origin path: see :mod:`service.core.comparison`), one-sided for "the model is worse",
    then Holm (1979) across the benchmarks. ``p_value`` is the smallest Holm-adjusted p-value
    and ``statistic`` that comparison's DM statistic; ``details`` name the benchmark
    (``compared_with``), the model's error relative to it (``relative_error``: RMSE ratio for
    squared loss, MAE ratio for absolute), each benchmark's adjusted p-value, and the
    descriptive skill over the best benchmark on the holdout (``skill``, ``best_benchmark``,
    RMSEs). Skipped without a holdout or with fewer than ``min_obs`` steps to compare.
    """
    if loss not in LOSSES:
        raise InputError("loss", f"must be one of {', '.join(LOSSES)}, got {loss!r}")
    skill = skill_over_benchmarks(batch)
    cmp = compare_with_benchmarks(batch, loss=loss, benchmarks=benchmarks, min_obs=min_obs)
    n = batch.n_series
    names = cmp.benchmarks
    ran = is_none(cmp.skip_reason) & ~np.isnan(cmp.p_worse_any)
    p_holm = np.where(np.isnan(cmp.p_holm), np.inf, cmp.p_holm)
    best = np.argmin(p_holm, axis=0) if names else np.zeros(n, dtype=np.int64)
    cols = np.arange(n)
    stat = cmp.tests.statistic[best, cols] if names else np.full(n, np.nan)
    # The model's error relative to the benchmark it is compared with, on the same steps.
    err, ok, _ = holdout_pairs(batch)
    relative = np.full(n, np.nan)
    if names and err.shape[1]:
        forecasts = benchmark_forecasts(batch, err.shape[1])
        for j, name in enumerate(names):
            b_err = batch.holdout.actuals - forecasts[name]  # type: ignore[union-attr]
            ratio = error_ratio(np.where(ok, err, np.nan), b_err, loss)
            relative = np.where(best == j, ratio, relative)
    # The reason a series could not be compared: no holdout, no benchmark, or the DM test's.
    no_run = np.where(is_none(cmp.skip_reason), "no comparison could run", cmp.skip_reason)
    first = np.isin(
        skill.skip_reason,
        [holdout_reason(1), "no benchmark could be fitted to the training actuals"],
    )
    reasons = np.where(ran, NONE, np.where(first, skill.skip_reason, no_run))
    chosen = np.array(names, dtype=object)[best] if names else np.full(n, None, dtype=object)
    details = {
        "compared_with": np.where(ran, chosen, NONE),
        "relative_error": np.where(ran & np.isfinite(relative), relative, np.nan),
        "loss": np.full(n, loss, dtype=object),
        **{f"p_{name}": np.where(ran, cmp.p_holm[j], np.nan) for j, name in enumerate(names)},
        **dict(skill.details),
    }
    return CheckResult(
        name="benchmark_skill",
        kind="test",
        statistic=np.where(ran, stat, np.nan),
        p_value=np.where(ran, cmp.p_worse_any, np.nan),
        details=details,
        skip_reason=reasons,
        null_hypothesis="the model's expected holdout loss is no larger than every benchmark's",
    )


# ------------------------------------------------------------------------------- declarations


def _skill_found(f: Finding) -> str:
    bench = str(f.detail("compared_with")).replace("_", " ")
    rel = float(f.detail("relative_error"))
    kind = "RMSE" if f.detail("loss") == "squared" else "MAE"
    return (
        f"the model is worse than the {bench} benchmark on the holdout: its {kind} is "
        f"{fmt(rel, 3)} times the benchmark's (Diebold-Mariano t = {fmt(f.statistic)}, "
        f"{f.p_text()}, Holm across the benchmarks; skill over the best benchmark "
        f"{fmt(float(f.detail('skill')), 2)})"
    )


def _skill_material(result: CheckResult, cp: CheckPolicy) -> np.ndarray:
    margin = cp.option("margin")
    rel = result.details["relative_error"]
    with np.errstate(invalid="ignore"):
        return rel > 1.0 + (0.0 if margin is None else float(margin))


def _skill_notes(
    result: CheckResult, p_adj: np.ndarray, codes: np.ndarray, immaterial: np.ndarray
) -> dict[int, str]:
    out = {}
    for i in np.flatnonzero(immaterial).tolist():
        bench = str(result.details["compared_with"][i]).replace("_", " ")
        rel = float(result.details["relative_error"][i])
        out[i] = (
            f"significantly worse than the {bench} benchmark, but by less than the policy's "
            f"margin (error {fmt(rel, 3)} times the benchmark's), so it passes"
        )
    return out


@dataclass(frozen=True)
class FleetAccuracy:
    """The fleet's accuracy against the benchmark it does worst against (the result's
    ``fleet.accuracy``): the average relative MAE (Davydenko & Fildes 2013) with its 95%
    interval over series, the one-sided p-value that it exceeds ``1 + margin`` (Holm across the
    benchmarks), the series used, and whether it is beyond the margin (``material``)."""

    benchmark: str | None
    relative_mae: float
    ci_low: float
    ci_high: float
    p_value: float
    series_used: int
    margin: float
    material: bool | None

    def to_dict(self) -> dict[str, Any]:
        return {k: to_python(v) for k, v in vars(self).items()}


_NO_FLEET_ACCURACY = FleetAccuracy(None, *(float("nan"),) * 4, 0, float("nan"), None)


def _benchmark_names(season_length: int, policy: Policy) -> list[str]:
    chosen = policy.check("benchmark_skill").option("benchmarks")
    names = [k for k in BENCHMARKS if k != "seasonal_naive" or season_length > 1]
    return [k for k in names if chosen is None or k in chosen]


def _gather_accuracy(checks: BatchChecks, weights: np.ndarray, policy: Policy) -> FleetPart:
    """Per benchmark, each series' log ratio of MAEs (``NaN`` where the check skipped it or
    the ratio is not defined) and its holdout steps (0 there)."""
    batch = checks.batch
    use = ~checks["benchmark_skill"].skipped
    rows: dict[str, np.ndarray] = {}
    for name in _benchmark_names(batch.season_length, policy):
        r = fleet_avg_rel_mae(batch, benchmark=name)
        lr = np.where(use, r.log_ratios, np.nan)
        rows[f"log_ratio:{name}"] = lr
        rows[f"steps:{name}"] = np.where(np.isfinite(lr), r.weights, 0).astype(float)
    return FleetPart(rows=rows)


def _fleet_accuracy(
    part: FleetPart, checks: BatchChecks, weights: np.ndarray, policy: Policy
) -> FleetFinding:
    batch = checks.batch
    cp = policy.check("benchmark_skill")
    margin = MARGIN if cp.option("margin") is None else float(cp.option("margin"))
    names = _benchmark_names(batch.season_length, policy)
    use = ~checks["benchmark_skill"].skipped
    if not names or not use.any():
        return FleetFinding(_NO_FLEET_ACCURACY)
    found = []
    for name in names:
        pooled = pooled_mean(part.rows[f"log_ratio:{name}"], part.rows[f"steps:{name}"])
        if pooled.n_series < 2 or not np.isfinite(pooled.std_error) or not pooled.std_error > 0:
            continue
        t = (pooled.estimate - np.log1p(margin)) / pooled.std_error
        found.append((float(t_sf(np.array(t), float(pooled.df))), name, pooled))
    if not found:
        return FleetFinding(_NO_FLEET_ACCURACY)
    p_adj = holm(np.array([f[0] for f in found]))
    j = int(np.argmin(p_adj))
    _, name, pooled = found[j]
    r = RelativeMae.of(pooled)
    summary = FleetAccuracy(
        benchmark=name,
        relative_mae=r.estimate,
        ci_low=r.ci_low,
        ci_high=r.ci_high,
        p_value=float(p_adj[j]),
        series_used=r.n_series,
        margin=margin,
        material=bool(r.estimate > 1.0 + margin),
    )
    bench = name.replace("_", " ")
    more = 100.0 * (r.estimate - 1.0)
    message = (
        f"Across the fleet the model's errors are {abs(more):.1f}% "
        f"{'larger' if more >= 0 else 'smaller'} than the {bench} benchmark's (relative MAE "
        f"{r.estimate:.3f}, 95% CI {r.ci_low:.3f}-{r.ci_high:.3f}, {r.n_series:,} series; "
        f"p = {summary.p_value:.2g} that it exceeds 1 + {margin:g}): a method that needs no "
        "model does better; do not ship this version."
    )
    return FleetFinding(
        summary,
        p_value=summary.p_value,
        material=bool(summary.material),
        message=message,
        warn_p=cp.fleet_warn_p,
    )


CHECKS = (
    CheckDef(
        name="benchmark_skill",
        title="Benchmark skill",
        kind="test",
        position=80,
        family="benchmarks",
        needs_holdout=True,
        tests=(
            "holdout accuracy against the mean, naive, seasonal naive and drift benchmarks: "
            "Diebold-Mariano test per benchmark, Holm across them; the fleet's average "
            "relative MAE"
        ),
        null_hypothesis="the model's expected holdout loss is no larger than every benchmark's",
        defaults=(
            "squared loss; EWC variance with t critical values; fails only beyond a 5% margin; "
            "skill = 1 - RMSE(model) / RMSE(best benchmark) reported"
        ),
        details=("compared_with", "relative_error", "loss", "skill", "best_benchmark"),
        source=(
            "Diebold & Mariano (1995), JBES 13:253-263; Harvey, Leybourne & Newbold (1997), "
            "IJF 13:281-291; Coroneo & Iacone (2020), J. Applied Econometrics 35:21-40; "
            "Holm (1979); Davydenko & Fildes (2013), IJF 29:510-522"
        ),
        run=lambda inputs, **options: benchmark_skill(inputs.batch, **options),
        rule=CheckPolicy(
            warn_p=0.05,
            fail_p=0.01,
            fleet_warn_p=0.05,
            fleet_fail_p=0.01,
            option_values=(("margin", MARGIN),),
        ),
        passed="not worse than the simple benchmarks on the holdout",
        found=_skill_found,
        meaning=(
            "a method that needs no model does better; do not ship this version for these series"
        ),
        options=(
            Option("min_obs"),
            Option("loss", kind="choice", choices=LOSSES),
            Option("benchmarks", kind="choices", choices=BENCHMARKS),
            Option("margin", kind="float", for_runner=False),
        ),
        material=_skill_material,
        pass_notes=_skill_notes,
        fleet=FleetTest(
            key="accuracy",
            gather=_gather_accuracy,
            finish=_fleet_accuracy,
            empty=FleetFinding(_NO_FLEET_ACCURACY),
        ),
    ),
)
