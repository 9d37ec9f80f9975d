"""Data sufficiency: how many usable residuals each series has."""

from __future__ import annotations

import numpy as np

from .batch import Residuals
from .results import CheckResult


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
