"""Data sufficiency: how many usable residuals each series has."""

from __future__ import annotations

import numpy as np

from ..batch import Residuals
from ..registry import CheckDef, CheckPolicy, Finding
from ..results import CheckResult


def data_sufficiency(res: Residuals) -> CheckResult:
    """Count usable residuals; never skipped.

    ``statistic`` is ``n_obs``, the observed residuals; ``details`` adds ``n_missing`` (gaps
    inside the span from the first residual to the last actual), ``n_leading`` (periods before
    the first residual, such as a naive method's first) and ``missing_share``.
    """
    n = res.n_obs
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
        },
        skip_reason=np.full(n.shape, None, dtype=object),
    )


# ------------------------------------------------------------------------------- declarations


def _sufficiency_found(f: Finding) -> str:
    return (
        f"only {int(f.detail('n_obs'))} usable residuals ({int(f.detail('n_missing'))} missing "
        "inside the span)"
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
        defaults="n_obs counts observed residuals; interior gaps are counted in n_missing",
        details=("n_obs", "n_missing", "n_leading", "missing_share"),
        source="project rule (see the policy's min_obs)",
        run=lambda inputs: data_sufficiency(inputs.residuals),
        # Fewer than 20 residuals leaves most tests with little power (common practice).
        rule=CheckPolicy(warn_below=20),
        passed="enough usable residuals for the checks",
        found=_sufficiency_found,
        meaning=(
            "the other checks have little power or were skipped; supply a longer history or "
            "fill the gaps in the fitted values"
        ),
        thresholds=("warn_below", "fail_below"),
    ),
)
