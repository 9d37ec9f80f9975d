"""Burn-in hint: does a series start with a run of extreme residuals, as a model does while its
states (level, trend, seasonal indices) settle from their initial values?"""

from __future__ import annotations

import numpy as np

from .batch import Residuals
from .residual_arrays import as_residuals, packed_chunks
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
BURN_IN_BLOCK = 1 << 20
"""Entries per block of series sorted at once (the median search then takes few steps)."""
MAD_NORMAL = 1.4826
"""``1 / Phi^{-1}(3/4)`` to four digits: the MAD of a normal sample times this estimates its
standard deviation (Hampel 1974; Rousseeuw & Croux 1993)."""


def burn_in_head(season_length: int) -> int:
    """How many first observed residuals are searched: ``max(2 m + 2, 10)`` (two seasons and
    the periods a level and a trend take to start; a rule of thumb). ``m = 1`` gives 10,
    ``m = 12`` gives 26, ``m = 52`` gives 106."""
    return max(2 * int(season_length) + 2, 10)


def _middle(s: FloatMatrix, m: IntVector) -> FloatVector:
    """Median of the first ``m[i]`` entries of each row of the row-sorted ``s``: the mean of
    the two middle ones (one when ``m`` is odd)."""
    r = np.arange(s.shape[0])
    return 0.5 * (s[r, (m - 1) // 2] + s[r, m // 2])


def _mad_sorted(s: FloatMatrix, m: IntVector, med: FloatVector) -> FloatVector:
    """Median of ``|s - med|`` over the first ``m[i]`` entries of each row of the row-sorted
    ``s`` (larger entries after them), without sorting the deviations.

    The deviations left of the median, read leftwards, and those right of it, read
    rightwards, are two ascending runs; each middle order statistic of their union comes
    from a binary search on how many of the smallest deviations the left run holds (vectorised
    over the rows, ``log2(m)`` steps). The very numbers ``|s_i - med|`` a sort of the
    deviations would give.
    """
    rows, width = s.shape
    flat = s.reshape(-1)
    m = m[:, None]
    med = med[:, None]
    p = (s < med).sum(axis=1)[:, None]  # length of the left run
    k = np.concatenate([(m - 1) // 2, m // 2], axis=1)  # the two middle ranks (0-based)
    # Flat positions of the smallest deviation of each run; an i outside a run (only ever
    # where np.where below discards the value) is clipped to the array.
    left_end = (np.arange(rows) * width)[:, None] + p - 1
    right_end = left_end + 1

    def left(i: np.ndarray) -> np.ndarray:  # the i-th smallest left deviation (0 <= i < p)
        return np.abs(flat.take(left_end - i, mode="clip") - med)

    def right(i: np.ndarray) -> np.ndarray:  # the i-th smallest right one (0 <= i < m - p)
        return np.abs(flat.take(right_end + i, mode="clip") - med)

    # i = how many of the k + 1 smallest deviations are left ones: lo <= i <= hi.
    lo = np.maximum(0, k + 1 - (m - p))
    hi = np.minimum(k + 1, p)
    while (search := lo < hi).any():
        mid = (lo + hi) // 2
        more = search & (left(mid) < right(k - mid))
        lo = np.where(more, mid + 1, lo)
        hi = np.where(search & ~more, mid, hi)
    last_left = np.where(lo > 0, left(lo - 1), -np.inf)
    last_right = np.where(k - lo >= 0, right(k - lo), -np.inf)
    kth = np.maximum(last_left, last_right)
    return 0.5 * (kth[:, 0] + kth[:, 1])


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
    n_rows = n.shape[0]
    n_ref = np.maximum(n - head, 0)
    run = np.zeros(n_rows, dtype=np.int64)
    extremes = np.zeros(n_rows, dtype=np.int64)
    first_z = np.full(n_rows, np.nan)
    scale = np.full(n_rows, np.nan)
    # Only the series with enough residuals after the head, in blocks of rows: the observed
    # residuals in their order (centred, in units of res.unit: ratios only).
    need = np.where(n_ref >= BURN_IN_MIN_REFERENCE, n, 0)
    chunks = packed_chunks(
        res.standard, need, res.start, res.n_missing == 0, res.observed, BURN_IN_BLOCK
    )
    for rows, block, nr in chunks:
        # The median and the MAD of the residuals after the head (+inf past a row's own).
        m = nr - head
        after = np.array(block[:, head:])
        if m[0] != m[-1]:  # rows of different lengths (ascending)
            after[np.arange(after.shape[1])[None, :] >= m[:, None]] = np.inf
        after.sort(axis=1)
        med = _middle(after, m)
        mad = _mad_sorted(after, m, med)
        sc = MAD_NORMAL * mad
        with np.errstate(invalid="ignore", divide="ignore"):
            z = np.abs(block[:, :head] - med[:, None]) / sc[:, None]
        extreme = z > threshold
        # Leading run: position of the first non-extreme entry in the head.
        run[rows] = np.where(extreme.all(axis=1), head, np.argmin(extreme, axis=1))
        extremes[rows] = extreme.sum(axis=1)
        first_z[rows] = z[:, 0]
        scale[rows] = sc
    reasons, ran = skip_reasons_and_ran(
        n.shape[0],
        (
            n_ref < BURN_IN_MIN_REFERENCE,
            f"fewer than {head + BURN_IN_MIN_REFERENCE} residuals (the head of {head} and "
            f"{BURN_IN_MIN_REFERENCE} after it)",
        ),
        (~(scale > 0), "the residuals after the head have a MAD of zero"),
    )
    return CheckResult(
        name="burn_in",
        kind="metric",
        statistic=np.where(ran, run, np.nan),
        p_value=np.full(n.shape, np.nan),
        details={
            "head": np.full(n.shape, head),
            "extremes_in_head": np.where(ran, extremes, 0),
            "first_robust_z": np.where(ran, first_z, np.nan),
            "threshold": np.full(n.shape, float(threshold)),
        },
        skip_reason=reasons,
        null_hypothesis="",
    )
