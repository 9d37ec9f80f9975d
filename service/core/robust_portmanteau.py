"""Robust portmanteau test of no autocorrelation, valid under heteroskedasticity (GARCH-like
volatility) and other dependence that leaves the residuals uncorrelated.

Source: Dalla, Giraitis & Phillips (2022), "Robust tests for white noise and
cross-correlation", Econometric Theory 38(5) (Cowles Foundation discussion paper 2194);
the formulas as the authors implement them in their R package ``testcorr`` (``ac.test``).
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from .batch import Residuals
from .residual_arrays import as_residuals
from .results import CheckResult, skip_reasons_and_ran
from .tails import chi2_sf
from .types import BoolMatrix, FloatMatrix, InputError, IntVector

ROBUST_THRESHOLD = 1.96
"""``lambda``: an off-diagonal ``r_jk`` enters ``R*`` only where ``|tau_jk| > lambda``. The
authors name 1.96 and 2.576 as good choices (``testcorr`` defaults to 2.576, which they find
better at relatively large lags)."""

ROBUST_NONSEASONAL_LAGS = 10
CHUNK_ELEMENTS = 1 << 18
"""Entries per (series, lag, period) block of lagged products: rows are processed in blocks of
at most this many ``lags x periods`` cells (and at most :data:`MAX_CHUNK_ROWS` rows), small
enough to stay in cache."""
MAX_CHUNK_ROWS = 2048
FORM_ELEMENTS = 1 << 20
"""Entries per (series, lag, lag) block of ``R*`` held for the quadratic forms."""
PD_TOLERANCE = 1e-8
"""Smallest eigenvalue of ``R*`` (a unit-diagonal matrix) accepted as positive definite."""


def robust_lag_mask(
    n_obs: IntVector, season_length: int = 1, *, max_lag: int = ROBUST_NONSEASONAL_LAGS
) -> BoolMatrix:
    """Default lags per series as a mask: column ``k - 1`` is ``True`` where lag ``k`` is tested.

    Lags ``1..L`` with ``L = min(max_lag, floor(T / 5))`` (the lag cap of
    :func:`service.core.autocorrelation.portmanteau_lags`), plus the seasonal lags ``m`` and
    ``2 m`` wherever ``k <= T / 2`` (at least as many pairs as the lag itself). A rule of thumb
    (common practice), not from the paper. ``T = 104, m = 52`` tests lags 1..10 and 52.
    """
    n = np.asarray(n_obs, dtype=np.int64).reshape(-1)
    m = int(season_length)
    width = max(max_lag, 2 * m if m > 1 else 0)
    k = np.arange(1, width + 1)[None, :]
    mask = k <= np.minimum(max_lag, n // 5)[:, None]
    if m > 1:
        seasonal = ((k == m) | (k == 2 * m)) & (2 * k <= n[:, None])
        mask = mask | seasonal
    return mask


def _lag_mask(lags: object, n: IntVector, season_length: int) -> BoolMatrix:
    if lags is None:
        return robust_lag_mask(n, season_length)
    if isinstance(lags, (int, np.integer)) and not isinstance(lags, bool):
        if lags < 1:
            raise InputError("lags", f"must be at least 1, got {lags}")
        return np.ones((n.shape[0], int(lags)), dtype=bool)
    arr = np.asarray(lags)
    if arr.ndim == 1:
        if arr.size == 0 or not np.issubdtype(arr.dtype, np.integer) or (arr < 1).any():
            raise InputError("lags", "must be positive integer lags")
        mask = np.zeros((n.shape[0], int(arr.max())), dtype=bool)
        mask[:, arr - 1] = True
        return mask
    if arr.ndim == 2 and arr.dtype == bool:
        if arr.shape[0] != n.shape[0]:
            raise InputError("lags", f"has {arr.shape[0]} rows, expected {n.shape[0]}")
        return arr.copy()
    raise InputError("lags", "expected an int, a sequence of lags or a (series, lag) bool mask")


def robust_lag_statistics(
    res: Residuals | FloatMatrix,
    lags: int | Sequence[int] | BoolMatrix | None = None,
    *,
    season_length: int = 1,
    threshold: float = ROBUST_THRESHOLD,
) -> dict[str, np.ndarray]:
    """Per-lag robust t statistics and the robust portmanteau statistic of every series.

    With ``e`` the residuals centred at their mean, ``e_tk = e_t e_{t-k}`` (``t`` counted from
    the first observed residual, a product term counting only where both values are observed)
    and ``S_k(a) = sum_{t > a} e_tk^2``:

    * ``t~_k = sum_t e_tk / sqrt(S_k(0))`` (0 where no pair is observed at lag ``k``);
    * ``r_jk = sum_t e_tj e_tk / sqrt(S_j(m) S_k(m))`` and
      ``tau_jk = sum_t e_tj e_tk / sqrt(sum_{t > m} e_tj^2 e_tk^2)`` with ``m = max(j, k)``;
    * ``R*`` has unit diagonal and ``r*_jk = r_jk 1(|tau_jk| > lambda)`` off it;
    * ``Q~ = t~' R*^{-1} t~`` over the tested lags.

    Dalla, Giraitis & Phillips (2022), their robust ``t~_k`` and cumulative ``Q~_m``
    statistics, with the sums' ranges of ``testcorr::ac.test``. Lags not tested for a series
    (outside its mask, beyond its span, or without an observed pair) get ``t~ = 0`` and an
    identity row and column in ``R*``, so they add nothing. Where ``R*`` is not positive
    definite (smallest eigenvalue at most :data:`PD_TOLERANCE`; the authors note ``Q~`` can then
    come out negative and ``testcorr`` reports it missing) ``Q~`` falls back to the diagonal form
    ``sum_k t~_k^2`` and ``diagonal_fallback`` is set.

    Returns a dict of arrays: ``lag_values`` (the tested lags, shape ``(K,)``), ``t`` (shape
    ``(n_series, K)``, ``NaN`` where a lag is not tested), ``tested`` (bool, same shape),
    ``q``, ``n_lags``, ``kept_pairs`` (off-diagonal pairs kept in ``R*``, each counted once),
    ``min_eigenvalue`` and ``diagonal_fallback`` (one entry per series).
    """
    if not threshold >= 0:
        raise InputError("threshold", f"must be 0 or more, got {threshold}")
    res = as_residuals(res)
    n = res.n_obs
    mask = _lag_mask(lags, n, season_length)
    span = np.maximum(res.lengths - res.start, 0)
    # A lag needs at least one pair inside the span (testcorr: max.lag <= n - 1).
    mask &= np.arange(1, mask.shape[1] + 1)[None, :] <= (span - 1)[:, None]
    # Union over the whole batch (never a chunk), so a row's arithmetic does not depend on
    # which other rows share its chunk.
    lag_values = np.flatnonzero(mask.any(axis=0)) + 1
    tested = mask[:, lag_values - 1]
    n_series = n.shape[0]
    n_k = lag_values.size
    out_t = np.full((n_series, n_k), np.nan)
    q = np.zeros(n_series)
    kept = np.zeros(n_series, dtype=np.int64)
    min_eig = np.ones(n_series)
    fallback = np.zeros(n_series, dtype=bool)
    width = res.standard.shape[1]
    if n_k and width:
        form_rows = max(1, FORM_ELEMENTS // (n_k * n_k))
        rows = int(min(MAX_CHUNK_ROWS, max(1, CHUNK_ELEMENTS // (n_k * width))))
        buf = _Buffers(min(rows, n_series), n_k, width)
        for lo in range(0, n_series, form_rows):
            hi = min(lo + form_rows, n_series)
            r_star = np.zeros((hi - lo, n_k, n_k))  # kept r_jk above the diagonal, else 0
            t = np.zeros((hi - lo, n_k))
            for c_lo in range(lo, hi, rows):
                part = slice(c_lo, min(c_lo + rows, hi))
                local = slice(part.start - lo, part.stop - lo)
                z = _aligned(res, part, buf.z)
                t[local], tested[part], kept[part] = _products(
                    z, lag_values, tested[part], threshold, r_star[local], buf
                )
            block = slice(lo, hi)
            q[block], min_eig[block], ok = _forms(t, r_star, kept[block])
            fallback[block] = ~ok
            out_t[block] = np.where(tested[block], t, np.nan)
    return {
        "lag_values": lag_values,
        "t": out_t,
        "tested": tested,
        "q": q,
        "n_lags": tested.sum(axis=1).astype(np.int64),
        "kept_pairs": kept,
        "min_eigenvalue": min_eig,
        "diagonal_fallback": fallback,
    }


def _aligned(res: Residuals, part: slice, out: np.ndarray) -> FloatMatrix:
    """Rows ``part`` of ``res.standard`` shifted left to their first observed residual, zeros
    in the columns freed on the right, in the C-ordered buffer ``out``."""
    start = res.start[part]
    values = res.standard
    width = values.shape[1]
    n_rows = part.stop - part.start
    z = out[: n_rows * width].reshape(n_rows, width)
    if (start == start[0]).all():
        s0 = min(int(start[0]), width)
        z[:, : width - s0] = values[part, s0:]
        z[:, width - s0 :] = 0.0
        return z
    rows = np.arange(part.start, part.stop)
    cols = np.arange(width)[None, :]
    values.reshape(-1).take((rows * width + start)[:, None] + cols, mode="clip", out=z)
    z[cols >= (width - start)[:, None]] = 0.0
    return z


class _Buffers:
    """Work arrays reused by every block of rows (no fresh large allocation per block)."""

    def __init__(self, rows: int, n_k: int, width: int) -> None:
        self.z = np.empty(rows * width)
        self.prod = np.empty(n_k * rows * width)
        self.sq = np.empty(n_k * rows * width)
        self.cross = np.empty(rows * n_k * n_k)
        self.quad = np.empty(rows * n_k * n_k)


def _products(
    z: FloatMatrix,
    lag_values: IntVector,
    tested: BoolMatrix,
    threshold: float,
    r_out: FloatMatrix,
    buf: _Buffers,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Robust ``t~`` (zero where not tested), the tested lags and the kept pairs per row of
    the left-aligned C-ordered rows ``z``; the kept ``r*_jk`` (``j < k``) go to ``r_out``
    above the diagonal.

    ``P_k(t) = e_t e_{t-k}`` for the lags (one slab of rows per lag), their sums, the Gram
    sums ``sum_t P_j P_k`` and ``sum_t P_j^2 P_k^2`` by a matrix product per series, and the
    tail sums ``S_j(m) = sum_{t >= m} P_j(t)^2`` at the tested lags: the sum from the top lag
    on plus the cumulative sums of the columns before it.
    """
    c, width = z.shape
    n_k = lag_values.size
    t_out = np.zeros((c, n_k))
    kept = np.zeros(c, dtype=np.int64)
    fits = lag_values < width  # lags without a pair inside these rows stay untested
    tested = tested & fits[None, :]
    use = np.flatnonzero(fits)
    if use.size == 0:
        return t_out, tested, kept
    lags = lag_values[use]
    n_use = lags.size
    top = int(lags[-1])
    # prod[a, i, t] = z_it z_i(t - lag_a), 0 for t < lag_a: each lag's slab is one product of
    # the flattened rows with themselves shifted, its first columns (which would pair a row
    # with the end of the previous one) then zeroed.
    flat = z.reshape(-1)
    prod = buf.prod[: n_use * c * width].reshape(n_use, c, width)
    tst = tested[:, use]
    for a, k in enumerate(lags):
        np.multiply(flat[k:], flat[:-k], out=prod[a].reshape(-1)[k:])
        prod[a, :, :k] = 0.0
        if not tst[:, a].all():
            prod[a] *= tst[:, a][:, None]
    sq = buf.sq[: n_use * c * width].reshape(n_use, c, width)
    np.multiply(prod, prod, out=sq)
    # S_a(m) = sum_{t >= m} P_a(t)^2 at m = top (the largest lag) and the columns before it
    # summed from the right: head[a, i, s] = sum_{s <= t < top} P_a(t)^2.
    tail = np.vecdot(prod[:, :, top:], prod[:, :, top:])  # (K, c)
    head = np.cumsum(sq[:, :, top - 1 :: -1], axis=2)[:, :, ::-1]

    def suffix(a: IntVector, m: IntVector) -> FloatMatrix:  # S_a(m) for lags m <= top
        inside = (m < top)[:, None]
        return tail[a] + np.where(inside, head[a, :, np.minimum(m, top - 1)], 0.0)

    total = suffix(np.arange(n_use), lags)  # S_a(lag_a) = S_a(0) = sum_t P_a(t)^2
    tst &= (total > 0).T  # a lag without an observed pair tests nothing
    sums = prod.sum(axis=2)  # sum_t P_a(t), (K, c)
    with np.errstate(invalid="ignore", divide="ignore"):
        t = np.where(tst, (sums / np.sqrt(total)).T, 0.0)
    t_out[:, use] = t
    tested[:, use] = tst
    if n_use < 2:
        return t_out, tested, kept
    # The pairs a < b (lags j < k): sum_t P_j P_k and sum_t P_j^2 P_k^2 per series (a dot
    # product per series and pair, stacked over the later lags of each a), and
    # S_j(m) = S_a(lag_b), S_k(m) = S_b(0) at m = max(j, k) = lag_b.
    ia, ib = np.triu_indices(n_use, 1)
    cross = buf.cross[: ia.size * c].reshape(ia.size, c)
    quad = buf.quad[: ia.size * c].reshape(ia.size, c)
    at = 0
    for a in range(n_use - 1):
        k = n_use - a - 1
        np.vecdot(prod[a][None], prod[a + 1 :], out=cross[at : at + k])
        np.vecdot(sq[a][None], sq[a + 1 :], out=quad[at : at + k])
        at += k
    s_j = suffix(ia, lags[ib])
    with np.errstate(invalid="ignore", divide="ignore"):
        r = cross / np.sqrt(s_j * total[ib])
        tau = cross / np.sqrt(quad)
    keep = (tst[:, ia] & tst[:, ib]).T & (np.abs(tau) > threshold) & np.isfinite(r)
    r_out[:, use[ia], use[ib]] = np.where(keep, r, 0.0).T
    kept[:] = keep.sum(axis=0)
    return t_out, tested, kept


def _forms(t: FloatMatrix, r_upper: np.ndarray, kept: IntVector) -> tuple[np.ndarray, ...]:
    """``Q~ = t~' R*^{-1} t~`` (``sum t~^2`` where ``R*`` is not positive definite), the
    smallest eigenvalue of ``R*`` and whether it is positive definite, per row.

    ``R*`` has unit diagonal and the kept ``r*_jk`` of ``r_upper`` (above the diagonal, mirrored)
    off it. A lag in no kept pair has a unit row and column: it adds ``t~_k^2`` and an
    eigenvalue 1, so the eigenvalues and the solve run on the block of the lags in kept pairs
    only (rows grouped by its size; ``R* = I`` needs neither).
    """
    n = t.shape[0]
    q = np.vecdot(t, t)
    eig = np.ones(n)
    ok = np.ones(n, dtype=bool)
    rows = np.flatnonzero(kept > 0)
    if rows.size == 0:
        return q, eig, ok
    r_full = r_upper[rows] + r_upper[rows].transpose(0, 2, 1)
    active = (r_full != 0).any(axis=2)  # a kept r*_jk is never 0 (|tau_jk| > lambda >= 0)
    size = active.sum(axis=1)
    order = np.argsort(~active, axis=1, kind="stable")  # the lags in kept pairs first
    t_rows = t[rows]
    rest = np.vecdot(np.where(active, 0.0, t_rows), np.where(active, 0.0, t_rows))
    for s in np.unique(size):
        grp = np.flatnonzero(size == s)
        idx = order[grp, :s]
        block = r_full[grp[:, None, None], idx[:, :, None], idx[:, None, :]]
        diag = np.arange(s)
        block[:, diag, diag] = 1.0
        ev = np.linalg.eigvalsh(block)[:, 0]
        good = ev > PD_TOLERANCE
        tt = np.take_along_axis(t_rows[grp], idx, axis=1)
        safe = np.where(good[:, None, None], block, np.eye(s)[None, :, :])
        solved = np.linalg.solve(safe, tt[:, :, None])[:, :, 0]
        target = rows[grp]
        eig[target] = ev
        ok[target] = good
        q[target] = np.where(good, rest[grp] + np.vecdot(tt, solved), q[target])
    return q, eig, ok


def robust_portmanteau(
    res: Residuals | FloatMatrix,
    *,
    lags: int | Sequence[int] | BoolMatrix | None = None,
    season_length: int = 1,
    model_params: int = 0,
    threshold: float = ROBUST_THRESHOLD,
) -> CheckResult:
    """Robust portmanteau test of no autocorrelation at the tested lags (Dalla, Giraitis &
    Phillips 2022).

    ``Q~ = t~' R*^{-1} t~`` of :func:`robust_lag_statistics`, referred to chi-square with
    ``df = K - model_params``, ``K`` the number of lags tested for the series. ``lags``: ``None``
    (:func:`robust_lag_mask` with ``season_length``), an int ``L`` (lags ``1..L``), a sequence
    of lags (the same set for every series) or a ``(n_series, max_lag)`` bool mask whose column
    ``k - 1`` marks lag ``k`` (a different set per series). Lags beyond a series' span are
    dropped for it. ``threshold`` is ``lambda``.

    Details: ``lags`` (``K``), ``df``, ``max_lag``, ``t_lag1`` (``t~_1``), ``kept_pairs``,
    ``min_eigenvalue`` of ``R*`` and ``diagonal_fallback`` (``R*`` not positive definite, so
    ``Q~ = sum t~_k^2``). Skipped when no degrees of freedom are left or the residuals are
    constant.
    """
    if isinstance(model_params, bool) or model_params < 0:
        raise InputError("model_params", f"must be 0 or more, got {model_params}")
    res = as_residuals(res)
    st = robust_lag_statistics(res, lags, season_length=season_length, threshold=threshold)
    n = res.n_obs
    k = st["n_lags"]
    df = k - model_params
    reasons, ran = skip_reasons_and_ran(
        n.shape[0],
        (n < 2, "fewer than 2 residuals"),
        (res.constant, "residuals are constant, so autocorrelation is undefined"),
        (k < 1, "no lag with an observed pair to test"),
        (df <= 0, f"no degrees of freedom left: lags minus {model_params} model parameters <= 0"),
    )
    lag_values = st["lag_values"]
    tested = st["tested"]
    max_lag = np.where(tested, lag_values[None, :], 0).max(axis=1, initial=0)
    first = (lag_values == 1).nonzero()[0]
    t1 = st["t"][:, first[0]] if first.size else np.full(n.shape, np.nan)
    q = np.where(ran, st["q"], np.nan)
    return CheckResult(
        name="robust_portmanteau",
        kind="test",
        statistic=q,
        p_value=chi2_sf(q, np.maximum(df, 1)),
        details={
            "lags": k,
            "df": df,
            "max_lag": max_lag,
            "t_lag1": np.where(ran, t1, np.nan),
            "kept_pairs": st["kept_pairs"],
            "min_eigenvalue": np.where(ran, st["min_eigenvalue"], np.nan),
            "diagonal_fallback": ran & st["diagonal_fallback"],
            "threshold": np.full(n.shape, float(threshold)),
        },
        skip_reason=reasons,
        null_hypothesis="the residuals are not autocorrelated at the tested lags",
    )
