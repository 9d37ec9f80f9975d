"""Data sufficiency: how many usable residuals each series has."""

from __future__ import annotations

import numpy as np

from ..batch import Residuals
from ..burn_in import burn_in_hint
from ..registry import CheckDef, CheckInputs, CheckPolicy, Finding, fmt
from ..results import CheckResult
from ..types import IntVector


def data_sufficiency(
    res: Residuals, *, season_length: int = 1, burn_in: IntVector | None = None
) -> CheckResult:
    """Count usable residuals; never skipped.

    ``statistic`` is ``n_obs``, the observed residuals; ``details`` adds ``n_missing`` (gaps
    inside the span from the first residual to the end of the series), ``n_leading`` (periods
    before the first residual, such as a naive method's first), ``missing_share``, ``burn_in``
    (periods the request dropped) and ``possible_burn_in``: the number of leading residuals
    that are extreme against the rest (:func:`service.core.burn_in.burn_in_hint`, robust
    z above 8), a hint that they may be the model's start-up values.
    """
    n = res.n_obs
    if res.values.shape[1]:
        hint = burn_in_hint(res, season_length=season_length)
        leading = np.where(hint.skipped, 0, hint.statistic).astype(np.int64)
        first_z = np.where(hint.skipped | (leading < 1), np.nan, hint.details["first_robust_z"])
    else:  # no periods at all: nothing to hint at
        leading, first_z = np.zeros(n.shape, dtype=np.int64), np.full(n.shape, np.nan)
    span = n + res.n_missing
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        share = np.where(span > 0, res.n_missing / span, 0.0)
    return CheckResult(
        name="data_sufficiency",
        kind="metric",
        statistic=n.astype(float),
        p_value=np.full(n.shape, np.nan),
        details={
            "n_obs": n,
            "n_missing": res.n_missing,
            "n_leading": res.start,
            "missing_share": share,
            "burn_in": np.zeros(n.shape, dtype=np.int64) if burn_in is None else burn_in,
            "possible_burn_in": leading,
            "first_robust_z": first_z,
        },
        skip_reason=np.full(n.shape, None, dtype=object),
    )


# ------------------------------------------------------------------------------- declarations


def _sufficiency_found(f: Finding) -> str:
    n = int(f.detail("n_obs"))
    if n == 0:
        return "no usable residuals: every fitted value or every actual is missing"
    return f"only {n} usable residuals ({int(f.detail('n_missing'))} missing inside the span)"


def _burn_in_hints(result: CheckResult) -> dict[int, str]:
    k = result.details["possible_burn_in"]
    z = result.details["first_robust_z"]
    out = {}
    for i in np.flatnonzero(k > 0).tolist():
        first = "the first residual is" if k[i] == 1 else f"the first {int(k[i])} residuals are"
        out[i] = (
            f"{first} extreme against the rest (robust z {fmt(abs(float(z[i])), 3)}): if they "
            f"are the model's burn-in, drop them with burn_in = {int(k[i])}"
        )
    return out


def _run(inputs: CheckInputs) -> CheckResult:
    batch = inputs.batch
    return data_sufficiency(
        inputs.residuals, season_length=batch.season_length, burn_in=batch.burn_in
    )


CHECKS = (
    CheckDef(
        name="data_sufficiency",
        title="Data sufficiency",
        kind="metric",
        position=10,
        family="sufficiency",
        needs_holdout=False,
        tests="enough usable residuals for the other checks",
        null_hypothesis="",
        defaults=(
            "n_obs counts observed residuals; interior gaps are counted in n_missing; a series "
            "with none fails, below 20 warns"
        ),
        details=(
            "n_obs",
            "n_missing",
            "n_leading",
            "missing_share",
            "burn_in",
            "possible_burn_in",
            "first_robust_z",
        ),
        source="project rule (see the policy's min_obs); burn-in hint: robust z (Hampel 1974)",
        run=_run,
        # No usable residual fails the series (nothing could be tested); fewer than 20 leaves
        # most tests with little power (common practice) and warns.
        rule=CheckPolicy(warn_below=20, fail_below=1),
        passed="enough usable residuals for the checks",
        found=_sufficiency_found,
        meaning=(
            "the other checks have little power or were skipped; supply a longer history or "
            "fill the gaps in the fitted values"
        ),
        thresholds=("warn_below", "fail_below"),
        hint=_burn_in_hints,
    ),
)
