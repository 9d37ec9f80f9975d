"""Interval misses over the holdout: are they independent along the path (Christoffersen), and
does the fleet miss at its nominal rate?

A miss is a holdout step whose actual falls outside ``[lower, upper]``. Along one path the
misses are counted in pairs of consecutive scored steps (both actual and bounds observed):
``n_ij`` is the number of steps in state ``j`` after a step in state ``i`` (0: covered,
1: missed).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .batch import SeriesBatch
from .results import skip_reasons_and_ran
from .tails import chi2_sf, t_ppf, t_sf_two_sided
from .types import BoolMatrix, FloatVector, InputError, IntVector, ObjectVector

COVERAGE_MIN_OBS = 2


def _xlogy(x: np.ndarray, y: np.ndarray) -> np.ndarray:
    """``x log y`` with ``0 log 0 = 0``."""
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(x == 0, 0.0, x * np.log(np.where(x == 0, 1.0, y)))


def kupiec_lr(misses: np.ndarray, n: np.ndarray, miss_rate: np.ndarray) -> FloatVector:
    """Kupiec's (1995) proportion-of-failures likelihood ratio.

    ``LR = -2 ln[(1-p)^(T-x) p^x] + 2 ln[(1-x/T)^(T-x) (x/T)^x]`` with ``0 ln 0 = 0``,
    chi-square with 1 degree of freedom. ``x = 6, T = 252, p = 0.01`` gives 3.49878.
    """
    x = np.asarray(misses, dtype=float)
    t = np.asarray(n, dtype=float)
    p = np.asarray(miss_rate, dtype=float)
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        phat = x / t
    null = _xlogy(t - x, 1.0 - p) + _xlogy(x, p)
    alt = _xlogy(t - x, 1.0 - phat) + _xlogy(x, phat)
    return np.maximum(2.0 * (alt - null), 0.0)


def transition_counts(misses: BoolMatrix, scored: BoolMatrix) -> tuple[IntVector, ...]:
    """``(n00, n01, n10, n11)`` per row over the pairs of consecutive steps both scored.

    Misses 0, 1, 1, 0, 0, 1 give ``n00 = 1, n01 = 2, n10 = 1, n11 = 1``.
    """
    prev, curr = misses[:, :-1], misses[:, 1:]
    pair = scored[:, :-1] & scored[:, 1:]
    n00 = (pair & ~prev & ~curr).sum(axis=1)
    n01 = (pair & ~prev & curr).sum(axis=1)
    n10 = (pair & prev & ~curr).sum(axis=1)
    n11 = (pair & prev & curr).sum(axis=1)
    return n00, n01, n10, n11


def independence_lr(n00: IntVector, n01: IntVector, n10: IntVector, n11: IntVector) -> FloatVector:
    """Christoffersen's (1998, IER 39:841-862) likelihood ratio for independent misses.

    ``LR_ind = -2 ln[(1 - pi)^(n00 + n10) pi^(n01 + n11)]
    + 2 ln[(1 - pi0)^n00 pi0^n01 (1 - pi1)^n10 pi1^n11]`` with ``pi0 = n01 / (n00 + n01)``,
    ``pi1 = n11 / (n10 + n11)``, ``pi = (n01 + n11) / N`` and ``0 ln 0 = 0``; chi-square with
    1 degree of freedom. It is the likelihood-ratio (G) test of independence in the 2 x 2
    table of transitions, and 0 when ``pi0 = pi1``. ``n = (1, 2, 1, 1)`` gives
    ``2 [2 ln(2/3) + ln(1/3) + 2 ln(1/2) - 2 ln(2/5) - 3 ln(3/5)]`` = 0.138443.
    """
    a = np.asarray(n00, dtype=float)
    b = np.asarray(n01, dtype=float)
    c = np.asarray(n10, dtype=float)
    d = np.asarray(n11, dtype=float)
    with np.errstate(invalid="ignore", divide="ignore"):
        pi0 = b / (a + b)
        pi1 = d / (c + d)
        pi = (b + d) / (a + b + c + d)
    alt = _xlogy(a, 1.0 - pi0) + _xlogy(b, pi0) + _xlogy(c, 1.0 - pi1) + _xlogy(d, pi1)
    null = _xlogy(a + c, 1.0 - pi) + _xlogy(b + d, pi)
    return np.maximum(2.0 * (alt - null), 0.0)


@dataclass(frozen=True, eq=False)
class MissDependence:
    """Christoffersen's tests per series (arrays of length ``n_series``).

    ``lr_ind``/``p_ind``: independence (1 df); ``lr_cc``/``p_cc``: conditional coverage
    ``LR_POF + LR_ind`` (2 df); ``lr_pof``: Kupiec's statistic on all scored steps; the
    transition counts; ``n_scored``; ``skip_reason`` (``NaN`` statistics where skipped).
    """

    lr_ind: FloatVector
    p_ind: FloatVector
    lr_cc: FloatVector
    p_cc: FloatVector
    lr_pof: FloatVector
    n00: IntVector
    n01: IntVector
    n10: IntVector
    n11: IntVector
    n_scored: IntVector
    skip_reason: ObjectVector


def _misses(batch: SeriesBatch) -> tuple[BoolMatrix, BoolMatrix, FloatVector] | None:
    h = batch.holdout
    if h is None or h.lower is None or h.upper is None or h.level is None:
        return None
    scored = ~(np.isnan(h.actuals) | np.isnan(h.lower) | np.isnan(h.upper))
    scored &= ~np.isnan(h.level)[:, None]
    miss = scored & ((h.actuals < h.lower) | (h.actuals > h.upper))
    return miss, scored, h.level


def miss_dependence(batch: SeriesBatch, *, min_obs: int = COVERAGE_MIN_OBS) -> MissDependence:
    """Christoffersen's (1998) independence and conditional-coverage tests of the holdout
    interval misses, per series.

    Transitions (:func:`transition_counts`) are counted over consecutive scored steps; a gap
    breaks the chain. ``LR_ind`` is :func:`independence_lr`; ``LR_cc = LR_POF + LR_ind`` with
    ``LR_POF`` Kupiec's statistic (:func:`~kupiec_lr`) on all scored
    steps against ``1 - level``, chi-square with 2 degrees of freedom. Christoffersen's
    identity ``LR_cc = LR_uc + LR_ind`` holds exactly when ``LR_uc`` is computed on the steps
    after the first; on all steps, as here, it holds up to the first observation's term,
    the usual practice.

    Skipped: no intervals, fewer than ``min_obs`` scored steps (at least 2), no step scored
    after a miss (``n10 + n11 = 0``: ``pi1`` is not estimable, which includes a path with no
    miss or a single miss at its end), or no step scored after a covered step
    (``n00 + n01 = 0``).

    The test assumes misses of one-step-ahead intervals. On a one-origin path the errors of a
    correct model are themselves correlated (an h-step error shares the innovations of the
    steps before it), so its misses cluster and this test rejects a correct model of an
    autocorrelated series well above its level (``tests/perf/RESULTS_holdout_tests.md``).
    """
    n = batch.n_series
    got = _misses(batch)
    if got is None:
        zeros = np.zeros(n, dtype=np.int64)
        nan = np.full(n, np.nan)
        reasons = np.full(n, "no holdout intervals", dtype=object)
        return MissDependence(nan, nan, nan, nan, nan, zeros, zeros, zeros, zeros, zeros, reasons)
    miss, scored, level = got
    n00, n01, n10, n11 = transition_counts(miss, scored)
    t = scored.sum(axis=1)
    x = miss.sum(axis=1)
    need = max(min_obs, 2)
    reasons, ran = skip_reasons_and_ran(
        n,
        (t == 0, "no holdout intervals"),
        (t < need, f"fewer than {need} holdout steps with intervals"),
        (n10 + n11 == 0, "no scored step follows a miss, so independence cannot be tested"),
        (n00 + n01 == 0, "no scored step follows a covered step, so independence cannot be tested"),
    )
    lr_ind = independence_lr(n00, n01, n10, n11)
    lr_pof = kupiec_lr(x, t, 1.0 - level)
    lr_cc = lr_pof + lr_ind
    lr_ind = np.where(ran, lr_ind, np.nan)
    lr_cc = np.where(ran, lr_cc, np.nan)
    return MissDependence(
        lr_ind=lr_ind,
        p_ind=chi2_sf(lr_ind, 1),
        lr_cc=lr_cc,
        p_cc=chi2_sf(lr_cc, 2),
        lr_pof=np.where(ran, lr_pof, np.nan),
        n00=n00,
        n01=n01,
        n10=n10,
        n11=n11,
        n_scored=t,
        skip_reason=reasons,
    )


@dataclass(frozen=True, eq=False)
class FleetCoverage:
    """The fleet's pooled miss rate against the nominal rate.

    ``miss_rate`` is the weighted share of scored steps missed, ``nominal`` the weighted
    nominal miss rate ``1 - level`` over the same steps, ``excess = miss_rate - nominal`` with
    its cluster-robust ``std_error``, ``statistic`` (t), two-sided ``p_value`` (t with
    ``G - 1`` df) and interval; ``n_series`` (``G``) and ``n_steps`` used.
    """

    miss_rate: float
    nominal: float
    excess: float
    std_error: float
    ci_low: float
    ci_high: float
    level: float
    statistic: float
    p_value: float
    n_series: int
    n_steps: int
    df: int


def fleet_coverage(
    batch: SeriesBatch, *, weights: FloatVector | None = None, level: float = 0.95
) -> FleetCoverage:
    """Pooled coverage test over the fleet: does the fleet miss at its nominal rate?

    With ``x_i`` misses out of ``T_i`` scored steps, nominal miss rate ``a_i = 1 - level_i``
    and series weights ``w_i`` (default 1: every scored step counts the same),
    ``excess = sum w_i (x_i - T_i a_i) / sum w_i T_i``, the weighted miss rate minus the
    weighted nominal rate. Its variance is cluster-robust with the series as clusters (CR1;
    Liang & Zeger 1986; Cameron & Miller 2015, J. Human Resources 50:317-372):
    ``Var = G / (G - 1) sum_i w_i^2 (x_i - T_i a_i - T_i excess)^2 / (sum w_i T_i)^2`` over the
    ``G`` series used, so misses that cluster along a path widen it instead of inflating the
    evidence; ``t = excess / SE`` is referred to Student's t with ``G - 1`` degrees of
    freedom, as Cameron & Miller recommend with CR1. Series are taken as independent.
    Series without intervals or with a weight of 0 are left out; with fewer than 2 series the
    statistic is ``NaN``. ``level`` is the confidence level of the interval for ``excess``
    (the intervals' own levels come from the batch).
    """
    if not 0 < level < 1:
        raise InputError("level", f"must lie strictly between 0 and 1, got {level}")
    t, x, a = coverage_counts(batch)
    return fleet_coverage_from_counts(t, x, a, weights=weights, level=level)


def coverage_counts(batch: SeriesBatch) -> tuple[FloatVector, FloatVector, FloatVector]:
    """Per series: scored holdout steps ``T_i``, misses ``x_i`` and nominal miss rate ``a_i``
    (0 steps for a series without intervals): what :func:`fleet_coverage` pools."""
    got = _misses(batch)
    if got is None:
        zeros = np.zeros(batch.n_series)
        return zeros, zeros, zeros
    miss, scored, lev = got
    t = scored.sum(axis=1).astype(float)
    x = miss.sum(axis=1).astype(float)
    a = np.where(np.isnan(lev), 0.0, 1.0 - lev)
    return t, x, a


def fleet_coverage_from_counts(
    t: FloatVector,
    x: FloatVector,
    a: FloatVector,
    *,
    weights: FloatVector | None = None,
    level: float = 0.95,
) -> FleetCoverage:
    """:func:`fleet_coverage` from the series' :func:`coverage_counts`."""
    nan = float("nan")
    n_series = t.shape[0]
    w = np.ones(n_series) if weights is None else np.asarray(weights, dtype=float)
    if w.shape != (n_series,):
        raise InputError("weights", f"has {w.shape[0]} entries, expected {n_series}")
    use = (t > 0) & np.isfinite(w) & (w > 0)
    g = int(use.sum())
    if g == 0:
        return FleetCoverage(nan, nan, nan, nan, nan, nan, level, nan, nan, 0, 0, 0)
    wu, tu, xu, au = w[use] / w[use].max(), t[use], x[use], a[use]
    total = float((wu * tu).sum())
    rate = float((wu * xu).sum()) / total
    nominal = float((wu * tu * au).sum()) / total
    excess = rate - nominal
    if g < 2:
        return FleetCoverage(
            rate, nominal, excess, nan, nan, nan, level, nan, nan, g, int(tu.sum()), 0
        )
    u = wu * (xu - tu * au - tu * excess)
    se = float(np.sqrt(g / (g - 1) * float((u * u).sum()) / total**2))
    df = g - 1
    with np.errstate(divide="ignore", invalid="ignore"):
        stat = excess / se if se > 0 else (np.sign(excess) * np.inf if excess != 0 else 0.0)
    q = float(t_ppf(0.5 + level / 2.0, df))
    p = float(t_sf_two_sided(np.asarray(stat), df))
    return FleetCoverage(
        miss_rate=rate,
        nominal=nominal,
        excess=excess,
        std_error=se,
        ci_low=excess - q * se,
        ci_high=excess + q * se,
        level=level,
        statistic=float(stat),
        p_value=p,
        n_series=g,
        n_steps=int(tu.sum()),
        df=df,
    )
