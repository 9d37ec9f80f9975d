"""Run the registered checks over a batch in one pass."""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

from .batch import Residuals, SeriesBatch, residuals_of
from .registry import CheckInputs, all_checks, check_names
from .results import CheckResult
from .types import InputError

# Options each check accepts (besides the batch-wide season length and model parameters).
CHECK_OPTIONS: Mapping[str, frozenset[str]] = {c.name: c.runner_options for c in all_checks()}


@dataclass(frozen=True, eq=False)
class BatchChecks:
    """Every check's result over one batch, in catalogue order."""

    batch: SeriesBatch
    residuals: Residuals
    checks: Mapping[str, CheckResult]

    def __getitem__(self, name: str) -> CheckResult:
        return self.checks[name]

    def rows(self, part: slice) -> BatchChecks:
        """The checks of the series in ``part`` (a slice of rows; views, no copies)."""
        return BatchChecks(
            batch=self.batch.rows(part),
            residuals=self.residuals.rows(part),
            checks={k: r.rows(part) for k, r in self.checks.items()},
        )

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


def run_checks(
    batch: SeriesBatch,
    options: Mapping[str, Mapping[str, Any]] | None = None,
    *,
    only: tuple[str, ...] | None = None,
) -> BatchChecks:
    """Run the checks named in ``only`` (default all, in catalogue order) over ``batch``; a
    check that does not apply to the batch (``CheckDef.applies``: the baseline comparison
    without a baseline) is left out.

    ``options`` maps a check name to keyword options of that check (``CHECK_OPTIONS``), such
    as ``{"ljung_box": {"lags": 12}, "tracking_signal": {"window": 8}}``; ``None`` values mean
    the default rule.
    """
    options = options or {}
    wanted = check_names() if only is None else only
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
    inputs = CheckInputs(batch=batch, residuals=residuals_of(batch))
    results = {
        c.name: c.run(inputs, **opts[c.name])
        for c in all_checks()
        if c.name in opts and c.applies_to(batch)
    }
    return BatchChecks(batch=batch, residuals=inputs.residuals, checks=results)
