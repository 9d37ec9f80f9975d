"""Bias with a small-sample correction: the equal-weighted cosine (EWC) long-run variance.

Source: Lazarus, Lewis, Stock & Watson (2018), "HAR Inference: Recommendations for Practice",
Journal of Business & Economic Statistics 36(4), 541-559: the EWC estimator (p. 545) and their
recommended rule of ``nu = 0.4 T^(2/3)`` cosine terms with Student t_nu critical values (eq. 4,
rounded down as in footnote 3). The per-series bias check uses more terms
(:func:`series_bins`): it is tuned for residuals that are uncorrelated or nearly so, since
autocorrelated residuals are the autocorrelation check's finding (a series flagged by both gets
a caveat in its bias reason, :mod:`service.core.gate`).
"""

from __future__ import annotations

from collections.abc import Iterator

import numpy as np

from .batch import Residuals
from .residual_arrays import as_residuals, packed_blocks, residual_blocks
from .results import CheckResult, skip_reasons_and_ran
from .tails import t_ppf, t_sf_two_sided
from .types import FloatMatrix, FloatVector, InputError, IntVector

EWC_MIN_BINS = 2
"""Fewest cosine terms used: the rule gives 1 for ``4 <= T <= 11``, and ``t_1`` (Cauchy) makes a
test with a 5% critical value of 12.7 and an interval without a finite expected width. Under
independent normal errors the test is exact for any ``B`` (see :func:`ewc_bias`), so a second
term costs no size there, only robustness to autocorrelation the rule would have bought."""

EWC_MIN_OBS = 3
"""Fewest residuals: ``B = 2`` cosine terms need ``T >= 3`` (at most ``T - 1`` of them are
orthogonal to the mean)."""


def ewc_bins(n_obs: IntVector | int) -> IntVector:
    """Number of cosine terms ``B = max(floor(0.4 T^(2/3)), 2)``, at most ``T - 1`` (0 where
    ``T < 2``).

    The rounded-down rule of Lazarus, Lewis, Stock & Watson (2018), eq. 4, computed exactly in
    integers (``B <= 0.4 T^(2/3)`` is ``125 B^3 <= 8 T^2``), with the floor of
    :data:`EWC_MIN_BINS`. ``T = 20`` gives 2, ``T = 52`` gives 5, ``T = 104`` gives 8,
    ``T = 156`` gives 11, ``T = 1000`` gives 40.
    """
    t = np.asarray(n_obs, dtype=np.int64)
    t2 = t * t
    b = np.floor(np.cbrt(8.0 * t2.astype(float) / 125.0)).astype(np.int64)
    # Correct the floating-point cube root by one either way, in exact integer arithmetic.
    b = np.where(125 * (b + 1) ** 3 <= 8 * t2, b + 1, b)
    b = np.where(125 * b**3 > 8 * t2, b - 1, b)
    b = np.minimum(np.maximum(b, EWC_MIN_BINS), np.maximum(t - 1, 0))
    return b.astype(np.int64)


SERIES_BINS_DIVISOR = 6
"""``B = floor(T / 6)`` cosine terms for the per-series bias test (:func:`series_bins`)."""


def series_bins(n_obs: IntVector | int) -> IntVector:
    """Cosine terms of the per-series bias test: ``B = max(floor(T / 6), ewc_bins(T))``, at
    most ``T - 1``.

    ``T = 20`` gives 3, ``T = 30`` gives 5, ``T = 52`` gives 8, ``T = 104`` gives 17,
    ``T = 156`` gives 26. The cosines ``j <= T / 6`` are those of frequency ``pi j / T <= pi / 6``:
    the long-run variance is the average periodogram over the cycles of 12 periods or longer.
    A project's choice, not the paper's rule (:func:`ewc_bins`, LLSW eq. 4, which it never goes
    below), argued by the gate study (README): LLSW choose ``nu`` on a loss that weighs size
    distortion under persistent dependence against power; in the gate, autocorrelated
    residuals are the autocorrelation check's finding, so the bias test is tuned for residuals
    that are uncorrelated or nearly so. It stays exact under independent normal errors for
    every ``B`` (:func:`ewc_bias`); more terms bring it nearer the one-sample t test (``B = T -
    1``) and its power on one series nearer the z test's, but under a skewed residual the
    mean's far tail then reaches the t reference sooner: the divisor is the smallest whose
    fleets of skewed (centred lognormal) residuals still fail at most about 0.9% in the gate
    study (4.5 gave 1.1%).
    """
    t = np.asarray(n_obs, dtype=np.int64)
    b = np.maximum(t // SERIES_BINS_DIVISOR, ewc_bins(t))
    return np.minimum(b, np.maximum(t - 1, 0)).astype(np.int64)


def cosine_basis(n: int, bins: int) -> FloatMatrix:
    """``C[j - 1, t - 1] = cos(pi j (t - 1/2) / T)`` for ``j = 1..bins``, ``t = 1..T``
    (``T = n``): the cosines of the type-II transform, without the ``sqrt(2 / T)``."""
    phase = np.pi * (np.arange(n) + 0.5) / float(max(n, 1))
    return np.cos(np.arange(1, bins + 1)[:, None] * phase[None, :])


def _project(
    blocks: Iterator[tuple[slice | IntVector, FloatMatrix]], bins: IntVector, n_rows: int
) -> FloatMatrix:
    """``Lambda`` of :func:`cosine_projections` from blocks of rows sharing ``T``: each block's
    rows against one basis (per-row dot products, so a row's value does not depend on the
    other rows of its block)."""
    max_bins = int(bins.max(initial=0))
    out = np.zeros((n_rows, max_bins))
    basis: dict[int, FloatMatrix] = {}
    for rows, block in blocks:
        n = block.shape[1]
        b = bins[rows]
        top = int(b.max(initial=0))
        if top == 0:
            continue
        cos = basis.get(n)
        if cos is None or cos.shape[0] < top:  # one basis per distinct T
            cos = basis[n] = cosine_basis(n, top)
        lam = np.vecdot(block[:, None, :], cos[None, :top, :])
        lam *= np.sqrt(2.0 / n)
        if (b < top).any():
            lam[np.arange(1, top + 1)[None, :] > b[:, None]] = 0.0
        out[rows, :top] = lam
    return out


def cosine_projections(packed: FloatMatrix, n: IntVector, bins: IntVector) -> FloatMatrix:
    """``Lambda[:, j - 1] = sqrt(2 / T) sum_{t=1..T} cos(pi j (t - 1/2) / T) z_t`` for
    ``j = 1..max(bins)`` (0 past a row's own ``bins``), with ``z`` the first ``T = n[i]``
    entries of row ``i`` of ``packed`` (``n`` at most its width).

    The type-II cosine transform with orthonormal scaling: ``scipy.fft.dct(z, type=2,
    norm="ortho")[j]`` (Lazarus, Lewis, Stock & Watson 2018, p. 545). The basis vectors are
    orthonormal and orthogonal to a constant, so adding a constant to ``z`` changes nothing.
    The rows are taken in blocks of equal ``T``, one cosine basis per distinct ``T``.
    """
    n = np.asarray(n, dtype=np.int64)
    bins = np.asarray(bins, dtype=np.int64)
    rows = packed.shape[0]
    n = np.minimum(n, packed.shape[1])
    blocks = packed_blocks(packed, n, np.zeros(rows, dtype=np.int64), np.ones(rows, dtype=bool))
    return _project(blocks, bins, rows)


def residual_projections(res: Residuals, bins: IntVector) -> FloatMatrix:
    """:func:`cosine_projections` of each series' observed residuals in their order (gaps
    closed up; in units of ``res.unit``), read straight from ``res`` without packing the
    whole matrix."""
    return _project(residual_blocks(res), np.asarray(bins, dtype=np.int64), res.n_obs.shape[0])


def ewc_variance(projections: FloatMatrix, bins: IntVector) -> FloatVector:
    """``Omega = (1 / B) sum_{j=1..B} Lambda_j^2`` per row (``NaN`` where ``B = 0``)."""
    bins = np.asarray(bins, dtype=np.int64)
    # Summed term by term in order (not a dot product over the row): a row's sum then does
    # not depend on how many columns the batch's largest B gives it (zeros past its own B).
    total = np.zeros(projections.shape[0])
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        for j in range(projections.shape[1]):
            total += projections[:, j] * projections[:, j]
        return total / np.where(bins > 0, bins, np.nan)


def ewc_long_run_variance(
    res: Residuals | FloatMatrix, bins: IntVector | int | None = None
) -> FloatVector:
    """EWC long-run variance ``Omega`` of each series' observed residuals, in their order.

    ``Omega = (1/B) sum_{j=1..B} Lambda_j^2``, ``Lambda_j = sqrt(2/T) sum_{t=1..T}
    cos(pi j (t - 1/2) / T) (e_t - mean)`` over the ``T = n_obs`` observed residuals with the
    gaps closed up (Lazarus, Lewis, Stock & Watson 2018, p. 545); ``B`` from
    :func:`ewc_bins` unless given (capped at ``T - 1``).
    """
    res = as_residuals(res)
    n = res.n_obs
    b = _bins(n, bins)
    lam = residual_projections(res, b)
    with np.errstate(invalid="ignore", over="ignore"):
        return ewc_variance(lam, b) * res.unit * res.unit


def _bins(n: IntVector, bins: IntVector | int | None) -> IntVector:
    if bins is None:
        return ewc_bins(n)
    b = np.broadcast_to(np.asarray(bins, dtype=np.int64), n.shape)
    return np.minimum(b, np.maximum(n - 1, 0)).astype(np.int64)


def ewc_bias(
    res: Residuals | FloatMatrix,
    actuals_scale: FloatVector | None = None,
    *,
    bins: IntVector | int | None = None,
    ci_level: float = 0.95,
    min_obs: int = EWC_MIN_OBS,
) -> CheckResult:
    """t test of a zero mean residual with the EWC long-run variance and Student t critical
    values (Lazarus, Lewis, Stock & Watson 2018, p. 545 and eq. 4).

    ``t = sqrt(T) mean(e) / sqrt(Omega)`` with ``Omega`` from :func:`ewc_long_run_variance`
    (``T = n_obs``; gaps are closed up: the cosines run over the observed residuals in their
    order), referred to Student's t with ``B`` degrees of freedom, ``B`` from :func:`ewc_bins`
    unless ``bins`` is given (one value, or one per series; capped at ``T - 1``). The interval is
    ``mean +- t_{B, (1 + level)/2} SE`` with ``SE = sqrt(Omega / T)``.

    Exact under independent ``N(0, sigma^2)`` errors for every ``B <= T - 1``: the ``Lambda_j``
    are then independent ``N(0, sigma^2)`` and independent of the mean (orthonormal cosines
    orthogonal to the constant), so ``Omega / sigma^2 ~ chi2_B / B`` and ``t ~ t_B``. Under
    autocorrelation the t_B reference is the fixed-b approximation of the paper.

    As in :func:`service.core.checks.bias.bias`: residuals all equal but not zero are biased for
    certain (``t = +-inf``, ``p = 0``); all-zero residuals and series with fewer than
    ``min_obs`` (at least 3) residuals skip. ``percent_bias = 100 mean / actuals_scale`` where
    ``actuals_scale`` (the mean ``|actual|``) is given.
    """
    if bins is not None and (np.asarray(bins) < 1).any():
        raise InputError("bins", f"must be at least 1, got {np.min(bins)}")
    if not 0 < ci_level < 1:
        raise InputError("ci_level", f"must lie strictly between 0 and 1, got {ci_level}")
    res = as_residuals(res)
    n = res.n_obs
    b = _bins(n, bins)
    lam = residual_projections(res, b)
    omega_std = ewc_variance(lam, b)  # in units of res.unit ** 2
    mean = res.mean
    zero = res.constant & ~(np.abs(mean) > 1e-12 * res.rounding_scale)
    need = max(min_obs, EWC_MIN_OBS)
    reasons, ran = skip_reasons_and_ran(
        n.shape[0],
        (n < need, f"fewer than {need} residuals"),
        (zero, "residuals are all zero"),
    )
    df = np.maximum(b, 1).astype(float)
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        se = np.where(
            res.constant, 0.0, res.unit * np.sqrt(np.maximum(omega_std, 0.0) / np.maximum(n, 1))
        )
        t = np.where(se > 0, mean / se, np.sign(mean) * np.inf)
        p = t_sf_two_sided(t, df)
        # Few distinct degrees of freedom in a fleet: the quantile once for each.
        df_values, df_index = np.unique(df, return_inverse=True)
        q = t_ppf(0.5 + ci_level / 2.0, df_values)[df_index]
        pct = (
            np.full(n.shape, np.nan)
            if actuals_scale is None
            else 100.0 * mean / np.asarray(actuals_scale, dtype=float)
        )
    mean_r = np.where(ran, mean, np.nan)
    se_r = np.where(ran, se, np.nan)
    return CheckResult(
        name="ewc_bias",
        kind="test",
        statistic=np.where(ran, t, np.nan),
        p_value=np.where(ran, p, np.nan),
        details={
            "mean_error": mean_r,
            "std_error": se_r,
            "ci_low": mean_r - q * se_r,
            "ci_high": mean_r + q * se_r,
            "ci_level": np.full(n.shape, ci_level),
            "percent_bias": np.where(ran & np.isfinite(pct), pct, np.nan),
            "bins": np.where(ran, b, 0),
            "df": np.where(ran, b, 0),
            "n_obs": n,
        },
        skip_reason=reasons,
        null_hypothesis="the residuals have mean zero",
    )
