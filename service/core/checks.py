"""Run every series check over a batch in one pass."""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from .accuracy import mase
from .autocorrelation import ljung_box
from .batch import Residuals, SeriesBatch, residuals_of
from .benchmarks import benchmark_skill
from .bias import bias, tracking_signal
from .catalogue import CHECK_NAMES
from .intervals import interval_coverage
from .normality import jarque_bera
from .results import CheckResult
from .sufficiency import data_sufficiency
from .types import InputError
from .variance import arch_lm

# Options each check accepts (besides the batch-wide season length and model parameters).
CHECK_OPTIONS: Mapping[str, frozenset[str]] = {
    "data_sufficiency": frozenset(),
    "bias": frozenset({"hac_lags", "ci_level", "min_obs"}),
    "tracking_signal": frozenset({"window", "min_obs"}),
    "ljung_box": frozenset({"lags", "min_obs"}),
    "arch_lm": frozenset({"lags", "min_obs"}),
    "jarque_bera": frozenset({"min_obs"}),
    "mase": frozenset({"min_obs"}),
    "benchmark_skill": frozenset({"min_obs"}),
    "interval_coverage": frozenset({"min_obs"}),
}


@dataclass(frozen=True, eq=False)
class BatchChecks:
    """Every check's result over one batch, in catalogue order."""

    batch: SeriesBatch
    residuals: Residuals
    checks: Mapping[str, CheckResult]

    def __getitem__(self, name: str) -> CheckResult:
        return self.checks[name]

    def split(self, parts: Sequence[SeriesBatch]) -> list[BatchChecks]:
        """Hand back each part's results from checks run over ``stack_batches(parts)``."""
        if len(parts) == 1:
            return [BatchChecks(batch=parts[0], residuals=self.residuals, checks=self.checks)]
        out, start = [], 0
        for part in parts:
            rows = slice(start, start + part.n_series)
            start = rows.stop
            out.append(
                BatchChecks(
                    batch=part,
                    residuals=self.residuals.rows(rows),
                    checks={k: r.rows(rows) for k, r in self.checks.items()},
                )
            )
        if start != self.batch.n_series:
            raise ValueError("split: the parts do not add up to the checked batch")
        return out


def _mean_abs_actual(batch: SeriesBatch, res: Residuals) -> np.ndarray:
    a = np.where(res.observed, np.abs(batch.actuals), 0.0)
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        return a.sum(axis=1) / res.n_obs


def run_checks(
    batch: SeriesBatch,
    options: Mapping[str, Mapping[str, Any]] | None = None,
    *,
    only: tuple[str, ...] | None = None,
) -> BatchChecks:
    """Run the checks named in ``only`` (default all, see ``CHECK_NAMES``) over ``batch``.

    ``options`` maps a check name to keyword options of that check (``CHECK_OPTIONS``), such
    as ``{"ljung_box": {"lags": 12}, "tracking_signal": {"window": 8}}``; ``None`` values mean
    the default rule.
    """
    options = options or {}
    wanted = CHECK_NAMES if only is None else only
    for name in (*options, *wanted):
        if name not in CHECK_OPTIONS:
            raise InputError("options" if name in options else "only", f"unknown check {name!r}")
    opts: dict[str, dict[str, Any]] = {}
    for name in wanted:
        given = {k: v for k, v in (options.get(name) or {}).items() if v is not None}
        extra = set(given) - CHECK_OPTIONS[name]
        if extra:
            raise InputError(f"options.{name}", f"takes no option {sorted(extra)[0]!r}")
        opts[name] = given
    res = residuals_of(batch)
    m, k = batch.season_length, batch.model_params
    runners = {
        "data_sufficiency": lambda o: data_sufficiency(res),
        "bias": lambda o: bias(res, _mean_abs_actual(batch, res), **o),
        "tracking_signal": lambda o: tracking_signal(res, **o),
        "ljung_box": lambda o: ljung_box(res, season_length=m, model_params=k, **o),
        "arch_lm": lambda o: arch_lm(res, **o),
        "jarque_bera": lambda o: jarque_bera(res, **o),
        "mase": lambda o: mase(batch, **o),
        "benchmark_skill": lambda o: benchmark_skill(batch, **o),
        "interval_coverage": lambda o: interval_coverage(batch, **o),
    }
    results = {name: runners[name](opts[name]) for name in CHECK_NAMES if name in wanted}
    return BatchChecks(batch=batch, residuals=res, checks=results)
