"""Burn-in hint: does a series start with a run of extreme residuals, as a model does while its
states (level, trend, seasonal indices) settle from their initial values?"""

from __future__ import annotations

import numpy as np

from .batch import Residuals
from .residual_arrays import as_residuals, pack_observed
from .results import CheckResult, skip_reasons_and_ran
from .types import FloatMatrix, FloatVector, InputError, IntVector

BURN_IN_THRESHOLD = 8.0
"""Robust z beyond which a residual counts as extreme. Chosen from the false-hint rates measured
in ``tests/perf/study_residual_tests.py`` (``tests/perf/RESULTS_residual_tests.md``): at 8 no
series of independent normal noise got a hint (5,000 per cell, T = 52 to 156), 0.14-0.38% of
t(3) series did (tails far heavier than most forecast residuals') and at most 0.08% of
GARCH(0.1, 0.15, 0.8) series; at 6 the t(3) rate was 0.5-0.8%, at 4 about 2%."""
BURN_IN_MIN_REFERENCE = 10
"""Fewest residuals after the head: the median and MAD rest on them."""
MAD_NORMAL = 1.4826
"""``1 / Phi^{-1}(3/4)`` to four digits: the MAD of a normal sample times this estimates its
standard deviation (Hampel 1974; Rousseeuw & Croux 1993)."""


def burn_in_head(season_length: int) -> int:
    """How many first observed residuals are searched: ``max(2 m + 2, 10)`` (two seasons and
    the periods a level and a trend take to start; a rule of thumb). ``m = 1`` gives 10,
    ``m = 12`` gives 26, ``m = 52`` gives 106."""
    return max(2 * int(season_length) + 2, 10)


def _median_rows(values: FloatMatrix, n: IntVector) -> FloatVector:
    """Median of the first ``n[i]`` entries of each row of ``values`` (rows sorted with NaN
    last); ``NaN`` where ``n == 0``."""
    s = np.sort(values, axis=1)
    lo = np.maximum((n - 1) // 2, 0)
    hi = np.maximum(n // 2, 0)
    a = np.take_along_axis(s, lo[:, None], axis=1)[:, 0]
    b = np.take_along_axis(s, hi[:, None], axis=1)[:, 0]
    return np.where(n > 0, 0.5 * (a + b), np.nan)


def burn_in_hint(
    res: Residuals | FloatMatrix,
    *,
    season_length: int = 1,
    threshold: float = BURN_IN_THRESHOLD,
    head: int | None = None,
) -> CheckResult:
    """Length ``k`` of the leading run of extreme residuals among the first ``head`` observed
    residuals (default :func:`burn_in_head`): a hint to drop the first ``k`` periods before the
    other checks.

    A residual is extreme where its robust z, ``|e - median| / (1.4826 MAD)``, exceeds
    ``threshold`` (default 8), the median and the MAD (median absolute deviation from the
    median) taken over the observed residuals *after* the head, so a burn-in cannot inflate
    its own yardstick (the MAD scale estimate: Hampel 1974; Rousseeuw & Croux 1993, JASA 88,
    1273-1283). ``k`` counts the consecutive extreme residuals from the first observed one
    (gaps closed up); ``k = 0`` when the first is not extreme. ``details`` also hold the number
    of extreme residuals anywhere in the head, the head size and the robust z of the first.

    A metric, not a test: no p-value. Skipped when fewer than
    :data:`BURN_IN_MIN_REFERENCE` residuals follow the head, or when their MAD is 0 (half or
    more of them equal).
    """
    if not threshold > 0:
        raise InputError("threshold", f"must be positive, got {threshold}")
    if head is None:
        head = burn_in_head(season_length)
    if isinstance(head, bool) or not isinstance(head, (int, np.integer)) or head < 1:
        raise InputError("head", f"must be an integer of at least 1, got {head}")
    res = as_residuals(res)
    n = res.n_obs
    width = res.values.shape[1]
    # Observed residuals packed to the left (centred, in units of res.unit: ratios only).
    packed = pack_observed(res.standard, res.observed)
    col = np.arange(width)[None, :]
    n_ref = np.maximum(n - head, 0)
    ref = np.where((col >= head) & (col < n[:, None]), packed, np.nan)
    # Shift the reference block to the left edge so the row median can use the first n_ref.
    ref = np.concatenate([ref[:, head:], np.full((ref.shape[0], min(head, width)), np.nan)], axis=1)
    med = _median_rows(ref, n_ref)
    mad = _median_rows(np.abs(ref - med[:, None]), n_ref)
    scale = MAD_NORMAL * mad
    h = min(head, width)
    head_vals = packed[:, :h]
    in_head = col[:, :h] < np.minimum(n, head)[:, None]
    with np.errstate(invalid="ignore", divide="ignore"):
        z = np.abs(head_vals - med[:, None]) / scale[:, None]
    extreme = in_head & (z > threshold)
    # Leading run: position of the first non-extreme entry in the head.
    run = np.where(extreme.all(axis=1), in_head.sum(axis=1), np.argmin(extreme, axis=1))
    reasons, ran = skip_reasons_and_ran(
        n.shape[0],
        (
            n_ref < BURN_IN_MIN_REFERENCE,
            f"fewer than {head + BURN_IN_MIN_REFERENCE} residuals (the head of {head} and "
            f"{BURN_IN_MIN_REFERENCE} after it)",
        ),
        (~(scale > 0), "the residuals after the head have a MAD of zero"),
    )
    first_z = z[:, 0] if h else np.full(n.shape, np.nan)
    return CheckResult(
        name="burn_in",
        kind="metric",
        statistic=np.where(ran, run, np.nan),
        p_value=np.full(n.shape, np.nan),
        details={
            "head": np.full(n.shape, head),
            "extremes_in_head": np.where(ran, extreme.sum(axis=1), 0),
            "first_robust_z": np.where(ran, first_z, np.nan),
            "threshold": np.full(n.shape, float(threshold)),
        },
        skip_reason=reasons,
        null_hypothesis="",
    )
