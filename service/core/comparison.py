"""Is the model's holdout accuracy worse than a benchmark's? The Diebold-Mariano test, with an
equal-weighted cosine (EWC) variance by default or the Harvey, Leybourne & Newbold (1997)
modification, applied against several benchmarks at once, with Holm's step-down adjustment
across the benchmarks of each series.

A "skill < 0" read off the best benchmark on the holdout itself is no evidence: over a short
path, some benchmark beats a correct model by chance. The test here asks whether the model's
expected loss exceeds the benchmark's, allowing for the correlation of the losses along one
path; ``tests/perf/RESULTS_holdout_tests.md`` measures how often it calls a correct model worse.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from scipy.special import stdtr

from .batch import SeriesBatch, nearly_constant
from .holdout import BENCHMARKS, benchmark_forecasts
from .path_variance import autocovariances, centred, ewc_long_run, truncated_long_run
from .results import NONE, skip_reasons_and_ran
from .types import FloatMatrix, FloatVector, InputError, IntVector, ObjectVector

LOSSES = ("squared", "absolute")
DM_VARIANCES = ("ewc", "acf")
DM_MIN_OBS = 3
DM_EQUAL_LOSSES = "the model and the benchmark have equal losses at every step"
"""The skip reason of :func:`dm_test` where the two losses are equal at every step."""


def hln_factor(n_obs: IntVector | int, h: IntVector | int) -> FloatVector:
    """Harvey, Leybourne & Newbold's (1997, eq. 9) correction
    ``sqrt((n + 1 - 2h + h (h - 1) / n) / n)``. ``h = 1`` gives ``sqrt((n - 1) / n)``;
    ``n = 12, h = 2`` gives ``sqrt(55 / 72)``."""
    n = np.asarray(n_obs, dtype=float)
    h = np.asarray(h, dtype=float)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.sqrt((n + 1.0 - 2.0 * h + h * (h - 1.0) / n) / n)


def ewc_terms(n_obs: IntVector | int) -> IntVector:
    """Default number of cosine terms ``B = max(2, floor(0.8 n^(2/3)))`` of the EWC variance in
    :func:`dm_test`, capped at ``n - 1``: twice Lazarus, Lu, Stock & Stock's (2018) rule, the
    rule the simulation in ``tests/perf/RESULTS_holdout_tests.md`` supports for one-origin
    paths. ``n = 6, 12, 24`` give 2, 4, 6."""
    n = np.asarray(n_obs, dtype=float)
    b = np.maximum(np.floor(0.8 * n ** (2.0 / 3.0)), 2.0)
    return np.minimum(b, np.maximum(n - 1, 1)).astype(np.int64)


def _per_row(
    name: str,
    value: int | IntVector | None,
    lead: tuple[int, ...],
    n: IntVector,
    default: int | None,
) -> IntVector:
    """An integer option given once, per series or per row, as a flat per-row array."""
    if value is None:
        return np.full(n.shape, default, dtype=np.int64) if default else ewc_terms(n)
    arr = np.asarray(value)
    if arr.dtype.kind not in "iu" and not (arr == np.round(arr)).all():
        raise InputError(name, "must be a whole number")
    if (arr < 1).any():
        raise InputError(name, "must be at least 1")
    try:
        return np.broadcast_to(arr, lead).reshape(-1).astype(np.int64)
    except ValueError as exc:
        raise InputError(name, f"shape {arr.shape} does not fit the rows {lead}") from exc


@dataclass(frozen=True, eq=False)
class AccuracyComparison:
    """Diebold-Mariano-HLN tests, one per row (leading shape of the inputs).

    Attributes
    ----------
    statistic : ndarray
        ``DM*``; positive when the model's loss is larger. ``NaN`` where skipped.
    p_worse : ndarray
        One-sided p-value for "the model is worse": ``P(t_{n-1} >= DM*)``.
    p_two_sided : ndarray
        ``P(|t_{n-1}| >= |DM*|)``.
    mean_differential : ndarray
        ``dbar = mean(L(e_model) - L(e_bench))`` in the loss's units.
    variance : str
        ``"ewc"`` or ``"acf"``.
    h : ndarray of int
        ``"acf"``: dependence horizon used (after clamping and the fallback of a non-positive
        variance); 0 for ``"ewc"``.
    b : ndarray of int
        ``"ewc"``: cosine terms used, the degrees of freedom; 0 for ``"acf"``.
    fallback : ndarray of bool
        Where the variance with ``h - 1`` autocovariances was not positive and ``h = 1`` was
        used instead.
    n_obs : ndarray of int
        Steps with both losses observed.
    skip_reason : ndarray of object
        ``None`` where the test ran, else why not.
    """

    statistic: np.ndarray
    p_worse: np.ndarray
    p_two_sided: np.ndarray
    mean_differential: np.ndarray
    variance: str
    h: np.ndarray
    b: np.ndarray
    fallback: np.ndarray
    n_obs: np.ndarray
    skip_reason: np.ndarray


def _loss(e: np.ndarray, loss: str) -> np.ndarray:
    return e * e if loss == "squared" else np.abs(e)


def dm_test(
    model_errors: FloatMatrix,
    bench_errors: np.ndarray,
    *,
    loss: str = "squared",
    variance: str = "ewc",
    h: int | IntVector | None = None,
    b: int | IntVector | None = None,
    min_obs: int = DM_MIN_OBS,
) -> AccuracyComparison:
    """Diebold-Mariano test (Diebold & Mariano 1995) of "the model's expected loss is no
    larger than the benchmark's", with a small-sample variance for one short path.

    ``d_t = L(e_model,t) - L(e_bench,t)`` with ``L(e) = e^2`` (``loss="squared"``) or ``|e|``
    (``"absolute"``) over the ``n`` steps where both errors are observed, ``dbar`` its mean.

    ``variance="acf"``: the Harvey, Leybourne & Newbold (1997, IJF 13:281-291) modified test.
    ``DM = dbar / sqrt(V / n)``, ``V = gamma_0 + 2 sum_{k=1}^{h-1} gamma_k`` with ``gamma_k``
    the lag-``k`` autocovariances of ``d`` (observed pairs, divided by ``n``:
    :func:`~service.core.path_variance.autocovariances`); ``DM* = DM * hln_factor(n, h)``,
    referred to Student's t with ``n - 1`` degrees of freedom: R's ``forecast::dm.test(e_model,
    e_bench, h=h, power=p)``, whose ``alternative="greater"`` p-value is ``p_worse``. ``h``
    (default 1) is clamped to ``1..n - 1``. Where ``V <= 0`` (possible for ``h > 1``) the test
    falls back to ``h = 1`` (variance ``gamma_0``, factor at ``h = 1``), as
    ``forecast::dm.test`` does ("Variance is negative, using horizon h=1"); ``fallback`` marks
    it. Harvey, Leybourne & Whitehouse (2017, IJF 33:833-847) show how often ``V <= 0`` in
    small samples.

    ``variance="ewc"`` (default): ``DM = dbar / sqrt(Omega_EWC / n)`` with the equal-weighted
    cosine long-run variance of ``B = b`` terms
    (:func:`~service.core.path_variance.ewc_long_run`; Lazarus, Lu, Stock & Stock 2018),
    referred to Student's t with ``B`` degrees of freedom (fixed-b asymptotics; Coroneo &
    Iacone 2020, J. Appl. Econometrics 35:391-409, for the DM test). ``B`` defaults to
    :func:`ewc_terms` and is capped at ``n - 1``. On one-origin paths the ``"acf"`` test with
    any fixed ``h`` rejects a correct model as worse than a benchmark above the nominal rate
    when its errors are autocorrelated; this one does not
    (``tests/perf/RESULTS_holdout_tests.md``).

    ``h`` and ``b`` may be one value, one per series, or one per row of the result.

    Errors are divided by the row's largest ``|error|`` before the losses are taken, so huge
    or tiny units neither overflow nor underflow (the statistic is scale-free). Where ``d`` is
    constant but not zero its variance is 0: the statistic is ``+-inf`` and the p-values are
    the sign test's (``n`` equal signs: ``p_worse = 2^-n`` when the model loses at every step,
    1 when it wins at every step): a choice, which keeps two forecasts that differ by a
    constant under absolute loss from being called different for certain. Skipped: fewer than
    ``min_obs`` (at least 2) steps with both errors, or equal losses at every step.

    ``model_errors`` has shape ``(n_series, H)``; ``bench_errors`` the same or
    ``(k, n_series, H)`` for ``k`` benchmarks at once (the result then has shape
    ``(k, n_series)``).

    Example (computed in the tests): model errors 1, -2, 1, 3, -1, 2 against benchmark errors
    2, -1, 3, -2, 2, 3, squared loss, ``variance="acf"``, ``h = 1``:
    ``d = -3, 3, -8, 5, -3, -5``, ``DM* = -0.913500``, ``p_worse = 0.798560``.
    """
    if loss not in LOSSES:
        raise InputError("loss", f"must be one of {', '.join(LOSSES)}, got {loss!r}")
    if variance not in DM_VARIANCES:
        raise InputError("variance", f"must be one of {', '.join(DM_VARIANCES)}, got {variance!r}")
    if min_obs < 2:
        min_obs = 2
    e1 = np.asarray(model_errors, dtype=float)
    e2 = np.asarray(bench_errors, dtype=float)
    e1 = np.broadcast_to(e1, e2.shape) if e2.ndim > e1.ndim else e1
    if e1.shape != e2.shape:
        raise InputError("bench_errors", f"shape {e2.shape} does not match {e1.shape}")
    lead = e1.shape[:-1]
    e1 = e1.reshape(-1, e1.shape[-1])
    e2 = e2.reshape(-1, e2.shape[-1])
    observed = ~(np.isnan(e1) | np.isnan(e2))
    n = observed.sum(axis=1)
    unit = np.where(observed, np.maximum(np.abs(e1), np.abs(e2)), 0.0).max(axis=1, initial=0.0)
    unit = np.where(unit > 0, unit, 1.0)
    la = _loss(np.where(observed, e1, 0.0) / unit[:, None], loss)
    lb = _loss(np.where(observed, e2, 0.0) / unit[:, None], loss)
    d = np.where(observed, la - lb, 0.0)

    z, dbar = centred(d, observed)
    if variance == "acf":
        h_use = _per_row("h", h, lead, n, default=1)
        h_use = np.clip(h_use, 1, np.maximum(n - 1, 1))
        gamma = autocovariances(z, n, int(h_use.max(initial=1)) - 1)
        v = truncated_long_run(gamma, h_use)
        fallback = ~(v > 0) & (h_use > 1)
        h_use = np.where(fallback, 1, h_use)
        v = np.where(fallback, gamma[:, 0], v)
        b_use = np.zeros(n.shape, dtype=np.int64)
    else:
        b_use = _per_row("b", b, lead, n, default=None)
        b_use = np.clip(b_use, 1, np.maximum(n - 1, 1))
        v = ewc_long_run(z, observed, n, b_use)
        h_use = np.zeros(n.shape, dtype=np.int64)
        fallback = np.zeros(n.shape, dtype=bool)

    constant = nearly_constant(d, observed, np.maximum(la, lb).max(axis=1, initial=0.0))
    zero = constant & ~(np.abs(dbar) > 0)
    reasons, ran = skip_reasons_and_ran(
        n.shape[0],
        (n < min_obs, f"fewer than {min_obs} holdout steps with both forecasts"),
        (zero, DM_EQUAL_LOSSES),
    )
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        if variance == "acf":
            df = np.maximum(n - 1, 1).astype(float)
            stat = dbar / np.sqrt(v / n) * hln_factor(n, h_use)
        else:
            df = b_use.astype(float)
            stat = dbar / np.sqrt(v / n)
        degenerate = constant | ~(v > 0)
        stat = np.where(degenerate, np.sign(dbar) * np.inf, stat)
        p_worse = stdtr(df, -stat)  # stats.t.sf(stat, df)
        p_two = 2.0 * stdtr(df, -np.abs(stat))
        # No variation in d: the sign test of n equal signs instead (a choice).
        sign_p = 0.5 ** n.astype(float)
        p_worse = np.where(degenerate, np.where(dbar > 0, sign_p, 1.0), p_worse)
        p_two = np.where(degenerate, np.minimum(2.0 * sign_p, 1.0), p_two)
        mean_d = dbar * (unit**2 if loss == "squared" else unit)

    def shaped(x: np.ndarray) -> np.ndarray:
        return x.reshape(lead)

    return AccuracyComparison(
        statistic=shaped(np.where(ran, stat, np.nan)),
        p_worse=shaped(np.where(ran, p_worse, np.nan)),
        p_two_sided=shaped(np.where(ran, p_two, np.nan)),
        mean_differential=shaped(np.where(ran, mean_d, np.nan)),
        variance=variance,
        h=shaped(h_use),
        b=shaped(b_use),
        fallback=shaped(fallback & ran),
        n_obs=shaped(n),
        skip_reason=shaped(reasons),
    )


def holm(p_values: np.ndarray, axis: int = 0) -> np.ndarray:
    """Holm's (1979) step-down adjusted p-values along ``axis`` (one family per position on
    the other axes); ``NaN`` entries are left out of the family and kept.

    Over the ``m`` non-missing p-values in ascending order,
    ``p_adj_(i) = max_{j <= i} min(1, (m - j + 1) p_(j))``. Rejecting where ``p_adj <= alpha``
    controls the family-wise error rate at ``alpha`` under any dependence. Equals
    statsmodels' ``multipletests(p, method="holm")[1]``. For 0.01, 0.04, 0.03: 0.03, 0.06,
    0.06.
    """
    p = np.moveaxis(np.asarray(p_values, dtype=float), axis, -1)
    width = p.shape[-1]
    if width == 0:
        return np.moveaxis(p.copy(), -1, axis)
    m = width - np.isnan(p).sum(axis=-1, keepdims=True)
    order = np.argsort(p, axis=-1, kind="stable")  # NaN last
    ranked = np.take_along_axis(p, order, axis=-1)
    scaled = np.minimum((m - np.arange(width)) * ranked, 1.0)
    # Running maximum over the non-missing leaders; fmax passes over the trailing NaNs.
    adjusted = np.fmax.accumulate(scaled, axis=-1)
    adjusted = np.where(np.isnan(ranked), np.nan, adjusted)
    out = np.empty_like(adjusted)
    np.put_along_axis(out, order, adjusted, axis=-1)
    return np.moveaxis(out, -1, axis)


@dataclass(frozen=True, eq=False)
class BenchmarkComparison:
    """The model against each benchmark, per series.

    Attributes
    ----------
    benchmarks : tuple of str
        Benchmark names, the first axis of ``tests``' arrays.
    tests : AccuracyComparison
        Arrays of shape ``(k, n_series)``.
    p_holm : ndarray
        Holm-adjusted ``p_worse`` across the benchmarks of each series, ``(k, n_series)``.
    p_worse_any : ndarray
        Per series the smallest ``p_holm``: the evidence that the model is worse than some
        benchmark (``NaN`` where no comparison ran).
    worst_benchmark : ndarray of object
        The benchmark with that smallest adjusted p-value (``None`` where none ran).
    skip_reason : ndarray of object
        ``None`` where at least one comparison ran, else the first benchmark's reason.
    """

    benchmarks: tuple[str, ...]
    tests: AccuracyComparison
    p_holm: np.ndarray
    p_worse_any: FloatVector
    worst_benchmark: ObjectVector
    skip_reason: ObjectVector


def compare_with_benchmarks(
    batch: SeriesBatch,
    *,
    loss: str = "squared",
    variance: str = "ewc",
    h: int | IntVector | None = None,
    b: int | IntVector | None = None,
    benchmarks: Sequence[str] | None = None,
    min_obs: int = DM_MIN_OBS,
) -> BenchmarkComparison:
    """:func:`dm_test` of the holdout forecasts against each benchmark of
    :func:`~service.core.holdout.benchmark_forecasts` (fitted to the training actuals),
    vectorised over series and benchmarks (``loss``, ``variance``, ``h``, ``b`` and
    ``min_obs`` as there; ``h`` and ``b`` one value or one per series), then :func:`holm`
    across the benchmarks of each series. ``benchmarks`` picks some (default: all four,
    ``seasonal_naive`` only when the season length exceeds 1). A benchmark compares on the
    steps where it and the model both have a forecast and the actual is observed.

    Without a holdout every series is skipped ("no holdout").
    """
    names = [k for k in BENCHMARKS if k != "seasonal_naive" or batch.season_length > 1]
    if benchmarks is not None:
        unknown = [b for b in benchmarks if b not in names]
        if unknown:
            raise InputError("benchmarks", f"unknown or unavailable benchmark {unknown[0]!r}")
        names = [k for k in names if k in benchmarks]
    n = batch.n_series
    hold = batch.holdout
    width = 0 if hold is None else hold.actuals.shape[1]
    if hold is None or width == 0 or not names:
        k = len(names)
        nan = np.full((k, n), np.nan)
        reason = np.full((k, n), "no holdout", dtype=object)
        tests = AccuracyComparison(
            statistic=nan,
            p_worse=nan,
            p_two_sided=nan,
            mean_differential=nan,
            variance=variance,
            h=np.zeros((k, n), dtype=np.int64),
            b=np.zeros((k, n), dtype=np.int64),
            fallback=np.zeros((k, n), dtype=bool),
            n_obs=np.zeros((k, n), dtype=np.int64),
            skip_reason=reason,
        )
        return BenchmarkComparison(
            benchmarks=tuple(names),
            tests=tests,
            p_holm=nan,
            p_worse_any=np.full(n, np.nan),
            worst_benchmark=np.full(n, None, dtype=object),
            skip_reason=np.full(n, "no holdout", dtype=object),
        )
    forecasts = benchmark_forecasts(batch, width)
    model = hold.actuals - hold.forecasts
    bench = np.stack([hold.actuals - forecasts[k] for k in names])
    tests = dm_test(model, bench, loss=loss, variance=variance, h=h, b=b, min_obs=min_obs)
    p_holm = holm(tests.p_worse, axis=0)
    any_ran = ~np.isnan(p_holm).all(axis=0)
    best = np.argmin(np.where(np.isnan(p_holm), np.inf, p_holm), axis=0)
    cols = np.arange(n)
    p_any = np.where(any_ran, p_holm[best, cols], np.nan)
    worst = np.where(any_ran, np.array(names, dtype=object)[best], NONE)
    reason = np.where(any_ran, NONE, tests.skip_reason[0])
    return BenchmarkComparison(
        benchmarks=tuple(names),
        tests=tests,
        p_holm=p_holm,
        p_worse_any=p_any,
        worst_benchmark=worst,
        skip_reason=reason,
    )
