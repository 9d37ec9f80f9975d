"""Residual variance: Engle's ARCH LM test of constant (conditional) variance."""

from __future__ import annotations

import numpy as np
from numpy.lib.stride_tricks import sliding_window_view

from ..batch import Residuals, constant_from_range, scaled_squares
from ..registry import CheckDef, CheckPolicy, Finding, Option, fmt
from ..results import CheckResult, skip_reasons_and_ran
from ..tails import chi2_sf
from ..types import FloatMatrix, FloatVector, InputError, IntVector

ARCH_MAX_LAGS = 10
_CHUNK = 512


def arch_lags(n_obs: IntVector) -> IntVector:
    """Lag rule ``min(10, floor(T / 5))``, statsmodels' ``het_arch`` default."""
    return np.minimum(ARCH_MAX_LAGS, np.asarray(n_obs) // 5).astype(np.int64)


def _lm_one_order(
    z: FloatMatrix,
    valid: np.ndarray,
    lags: int,
    buffer: np.ndarray | None = None,
    span: tuple[int, int] | None = None,
) -> tuple[FloatVector, IntVector, FloatVector]:
    """``n R^2`` of ``s_t`` on ``1, s_{t-1}..s_{t-lags}`` for each row, with rows that miss any
    of those values left out. Returns (LM, rows used, centred total sum of squares).

    ``z``: the squares ``s`` less their row's mean over the observed ones (``R^2`` does not
    change, and the cross-products below are taken about values near zero, so they do not
    cancel), anything finite where missing (no usable row reads it). ``valid[:, r]``:
    regression row ``r`` (``s_{r + lags}`` on ``s_{r + lags - 1}..s_r``) has all its values
    observed (:func:`_usable_rows`); ``span`` ``(lo, hi)``, when given, says that is
    ``lo <= r < hi`` in every row.

    ``buffer``: optional flat float array of at least ``rows x (width - lags) x (lags + 1)``
    elements, reused between blocks for the regression rows (saves allocating them anew)."""
    n_series, width = z.shape
    rows = width - lags
    used = valid.sum(axis=1)
    # window[:, t, 0] is z_t, window[:, t, j] is z_{t-j}: a strided view, copied once into the
    # regression rows, of which the unusable ones are then zeroed.
    window = sliding_window_view(z, lags + 1, axis=1)[:, :, ::-1]
    size = n_series * rows * (lags + 1)
    if buffer is None or buffer.size < size:
        buffer = np.empty(size)
    cols = buffer[:size].reshape(n_series, rows, lags + 1)
    np.copyto(cols, window)
    if span is not None:  # the usable rows are lo..hi - 1 in every series
        cols[:, : span[0]] = 0.0
        cols[:, max(span[1], span[0]) :] = 0.0
    elif not valid.all():
        cols[~valid] = 0.0
    # One small Gram matrix per series, [y, x]' [y, x] over the usable rows (a batched matrix
    # product), centred with the column sums: this absorbs the intercept.
    gram = np.matmul(cols.transpose(0, 2, 1), cols)
    raw_diag = gram.diagonal(axis1=1, axis2=2).copy()
    sums = np.matmul(np.ones(rows), cols)  # column sums over the usable rows
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        means = np.where(used[:, None] > 0, sums / np.maximum(used, 1)[:, None], 0.0)
    gram -= sums[:, :, None] * means[:, None, :]
    # A column whose centred sum of squares is at rounding level (1e-12 of its raw sum of
    # squares) does not vary over the usable rows: exactly zero, so it explains nothing.
    flat = gram.diagonal(axis1=1, axis2=2) <= 1e-12 * raw_diag
    if flat.any():
        gram[flat[:, :, None] | flat[:, None, :]] = 0.0
    xtx = gram[:, 1:, 1:]
    xty = gram[:, 1:, 0]
    tss = gram[:, 0, 0]
    # Scale to unit diagonal before solving; a column without variation gets a unit diagonal
    # and zero right-hand side, so its coefficient is 0.
    d = np.sqrt(xtx.diagonal(axis1=1, axis2=2))
    d = np.where(d > 0, d, 1.0)
    a = np.empty(xtx.shape)  # C-contiguous, so the reshape below is a view
    np.divide(xtx, d[:, :, None], out=a)
    a /= d[:, None, :]
    a.reshape(a.shape[0], lags * lags)[:, :: lags + 1] = 1.0  # the diagonal
    b = xty / d
    coef = _solve_each(a, b)
    explained = np.vecdot(coef, b)
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        r2 = explained / tss
    return used * r2, used.astype(np.int64), tss


def _usable_rows(
    observed: np.ndarray, start: IntVector, end: IntVector, gap_free: bool, lags: int
) -> np.ndarray:
    """``valid[:, r]``: the values ``r..r + lags`` of a row are all observed. ``gap_free``:
    every row's observed values are the columns ``start..end - 1`` (no gap), so that is
    ``start <= r <= end - 1 - lags``; else from a running count of the missing values."""
    n_series, width = observed.shape
    rows = width - lags
    if gap_free:
        r = np.arange(rows)[None, :]
        return (r >= start[:, None]) & (r <= (end - 1 - lags)[:, None])
    missing = np.zeros((n_series, width + 1), dtype=np.int64)
    np.cumsum(~observed, axis=1, out=missing[:, 1:])
    return missing[:, lags + 1 :] == missing[:, :rows]


def _solve_each(a: np.ndarray, b: FloatMatrix) -> FloatMatrix:
    """Solve ``a[i] x[i] = b[i]`` for a stack of systems; a singular system (a lag column that
    does not vary, or exactly collinear lags) gets the pseudo-inverse, on its own, so one
    series never changes how another is solved."""
    try:
        return np.linalg.solve(a, b[:, :, None])[:, :, 0]
    except np.linalg.LinAlgError:
        pass
    sign, _ = np.linalg.slogdet(a)
    singular = sign == 0
    coef = np.empty_like(b)
    regular = ~singular
    if regular.any():
        coef[regular] = np.linalg.solve(a[regular], b[regular][:, :, None])[:, :, 0]
    coef[singular] = np.einsum("njk,nk->nj", np.linalg.pinv(a[singular]), b[singular])
    return coef


def arch_lm(res: Residuals, *, lags: int | None = None, min_obs: int = 0) -> CheckResult:
    """Engle's (1982) Lagrange multiplier test for ARCH effects.

    ``LM = n R^2`` from the OLS regression of the squared residuals on a constant and their own
    ``L`` lags, ``n`` the rows with all ``L + 1`` values observed, referred to chi-square with
    ``L`` degrees of freedom. The residuals are squared as they are (not demeaned), as in
    statsmodels' ``het_arch(resid, nlags=L)``. ``L`` follows :func:`arch_lags` unless given.

    Skipped when the rule gives no lag, when fewer than ``L + 2`` regression rows remain, or
    when the squared residuals do not vary (constant or ``+-c`` residuals).
    """
    if lags is not None and lags < 1:
        raise InputError("lags", f"must be at least 1, got {lags}")
    n = res.n_obs
    n_series = n.shape[0]
    used_lags = arch_lags(n) if lags is None else np.full(n.shape, lags, dtype=np.int64)
    lm = np.full(n_series, np.nan)
    rows = np.zeros(n_series, dtype=np.int64)
    tss = np.full(n_series, np.nan)
    # Squares of e over its largest |e| (R^2 does not depend on the unit): values in [0, 1],
    # so the cross-products of squares neither overflow nor underflow; 0 where missing.
    observed = res.observed
    top, z = scaled_squares(res)
    # Shift each row by the mean of its observed squares (its whole width: a row's sums do not
    # depend on the rows beside it).
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        shift = np.where(n > 0, res.square_sums[1] / np.maximum(n, 1), 0.0)
    # Where a square is missing, z is -shift: no usable regression row holds such a value.
    np.subtract(z, shift[:, None], out=z)
    # Loop over the few distinct lag orders and over blocks of rows, never over single series.
    width = z.shape[1]
    buffer = np.empty(min(_CHUNK, n_series) * width * (ARCH_MAX_LAGS + 1)) if n_series else None
    gap_free = res.n_missing == 0
    positive = used_lags[used_lags >= 1]
    if positive.size and (positive == positive[0]).all():
        orders = positive[:1]  # one order for the whole batch (the usual case): no sort
    else:
        orders = np.unique(positive)
    for order in orders.tolist():
        members = np.flatnonzero(used_lags == order)
        if order >= width:  # no regression row at all
            continue
        for lo in range(0, members.size, _CHUNK):
            idx = members[lo : lo + _CHUNK]
            contiguous = idx[-1] - idx[0] + 1 == idx.size
            # A run of consecutive series is a view; otherwise gather the rows. Over the
            # batch's whole width, never trimmed to the block's span: a row's sums then do not
            # depend on which other rows share its block (a fleet assessed in chunks gives the
            # numbers of the whole, to the last bit).
            part = slice(idx[0], idx[-1] + 1) if contiguous else idx
            starts, ends = res.start[part], res.lengths[part]
            plain = bool(gap_free[part].all())
            valid = _usable_rows(observed[part], starts, ends, plain, order)
            span = None
            if plain and (starts == starts[0]).all() and (ends == ends[0]).all():
                span = (int(starts[0]), int(ends[0]) - order)  # the same rows in every series
            lm[idx], rows[idx], tss[idx] = _lm_one_order(z[part], valid, order, buffer, span)
    # Squares that do not vary: constant residuals, +-c residuals (equal |e| within rounding:
    # the largest and smallest observed |e| of :func:`nearly_constant`), or no variation left
    # in the regression rows.
    smallest = np.fmin.reduce(np.abs(res.values), axis=1, initial=np.inf)  # NaN: missing
    equal_size = constant_from_range(top, smallest, n >= 2, res.rounding_scale)
    flat = res.constant | equal_size | ~(tss > 0)
    reasons, ran = skip_reasons_and_ran(
        n_series,
        (n < max(min_obs, 2), f"fewer than {max(min_obs, 2)} residuals"),
        (used_lags < 1, "too short for one lag (the lag rule allows at most T/5)"),
        (rows < used_lags + 2, "too few complete rows for the regression"),
        (flat, "squared residuals are constant, so their variance cannot change"),
    )
    lm = np.where(ran, np.maximum(lm, 0.0), np.nan)
    return CheckResult(
        name="arch_lm",
        kind="test",
        statistic=lm,
        p_value=chi2_sf(lm, np.maximum(used_lags, 1)),
        details={"lags": used_lags, "df": used_lags, "n_rows": rows},
        skip_reason=reasons,
        null_hypothesis="the residual variance is constant (no ARCH effects)",
    )


# ------------------------------------------------------------------------------- declarations


def _arch_found(f: Finding) -> str:
    return (
        f"residual variance is not constant (Engle LM = {fmt(f.statistic)} on "
        f"{int(f.detail('lags'))} lags, {f.p_text()})"
    )


CHECKS = (
    CheckDef(
        name="arch_lm",
        title="ARCH LM variance",
        kind="test",
        position=50,
        family="variance",
        needs_holdout=False,
        tests="residual variance not constant: n R^2 of squared residuals on their own lags",
        null_hypothesis="the residual variance is constant (no ARCH effects)",
        defaults="L = min(10, T/5), statsmodels' het_arch default",
        details=("lags", "df", "n_rows"),
        source="Engle (1982), Econometrica 50:987-1007",
        run=lambda inputs, **options: arch_lm(inputs.residuals, **options),
        # Useful but not essential: warn only.
        rule=CheckPolicy(warn_p=0.01),
        passed="no evidence that the residual variance changes over time",
        found=_arch_found,
        meaning=(
            "prediction intervals will be too narrow in volatile periods and too wide in calm "
            "ones; model the variance or transform the series"
        ),
        options=(Option("min_obs"), Option("lags", minimum=1)),
    ),
)
