"""Holdout skill over the simple benchmarks of :mod:`service.core.holdout`."""

from __future__ import annotations

import numpy as np

from ..batch import SeriesBatch
from ..holdout import BENCHMARKS, benchmark_forecasts, holdout_pairs, holdout_reason
from ..registry import CheckDef, CheckPolicy, Finding, Option, fmt
from ..results import CheckResult, skip_reasons_and_ran
from ..types import FloatMatrix


def _rmse(err: FloatMatrix, ok: np.ndarray, count: np.ndarray) -> np.ndarray:
    """Root mean square of ``err`` where ``ok``, computed over the row's largest ``|err|`` so
    squares of large errors do not overflow."""
    peak = np.where(ok, np.abs(err), 0.0).max(axis=1, initial=0.0)
    peak = np.where(peak > 0, peak, 1.0)
    scaled = np.where(ok, err, 0.0) / peak[:, None]
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        return peak * np.sqrt((scaled * scaled).sum(axis=1) / count)


def benchmark_skill(batch: SeriesBatch, *, min_obs: int = 1) -> CheckResult:
    """Skill over the best simple benchmark on the holdout.

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
            name="benchmark_skill",
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
        name="benchmark_skill",
        kind="metric",
        statistic=np.where(ran, skill, np.nan),
        p_value=np.full(n, np.nan),
        details={
            "best_benchmark": np.where(ran, best_name, None),
            "skill": np.where(ran, skill, np.nan),
            "rmse_model": np.where(ran, model_rmse, np.nan),
            "rmse_best": np.where(ran, best, np.nan),
            **details,
            "horizon": count,
        },
        skip_reason=reasons,
    )


# ------------------------------------------------------------------------------- declarations


def _skill_found(f: Finding) -> str:
    best = str(f.detail("best_benchmark")).replace("_", " ")
    return (
        f"the {best} benchmark beats the model on the holdout (skill {fmt(f.statistic, 2)}: "
        f"RMSE {fmt(float(f.detail('rmse_model')), 4)} against "
        f"{fmt(float(f.detail('rmse_best')), 4)})"
    )


CHECKS = (
    CheckDef(
        name="benchmark_skill",
        title="Benchmark skill",
        kind="metric",
        position=80,
        family="benchmarks",
        needs_holdout=True,
        tests="holdout RMSE against the best of mean, naive, seasonal naive and drift",
        null_hypothesis="",
        defaults="skill = 1 - RMSE(model) / RMSE(best benchmark)",
        details=("best_benchmark", "skill", "rmse_model", "rmse_best"),
        source="Hyndman & Athanasopoulos, Forecasting: Principles and Practice, simple methods",
        run=lambda inputs, **options: benchmark_skill(inputs.batch, **options),
        # Worse than the best simple benchmark fails the series; the fleet warns when more
        # than 10% of its weight loses to a benchmark and fails beyond 25%.
        rule=CheckPolicy(fail_below=0.0, warn_share=0.10, fail_share=0.25),
        passed="beats the simple benchmarks on the holdout",
        found=_skill_found,
        meaning=(
            "a method that needs no model does better; do not ship this version for these series"
        ),
        options=(Option("min_obs"),),
        thresholds=("warn_below", "fail_below"),
    ),
)
