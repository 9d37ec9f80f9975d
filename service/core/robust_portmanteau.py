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
CHUNK_ELEMENTS = 1 << 16
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
    :func:`service.core.checks.autocorrelation.portmanteau_lags`), plus the seasonal lags ``m`` and
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
            active = np.zeros((hi - lo, n_k), dtype=bool)  # lags in a kept pair
            for c_lo in range(lo, hi, rows):
                part = slice(c_lo, min(c_lo + rows, hi))
                local = slice(part.start - lo, part.stop - lo)
                z = _aligned(res, part, buf)
                t[local], tested[part], kept[part], active[local] = _products(
                    z, width, lag_values, tested[part], threshold, r_star[local], buf
                )
            block = slice(lo, hi)
            q[block], min_eig[block], ok = _forms(t, r_star, active)
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


DOT_BLOCK = 32
"""The lagged products are held ``DOT_BLOCK``-aligned in length (zeros after the last period), so
the per-series dot products run whole in the vectorised loop of the dot kernel."""


class _Buffers:
    """Work arrays reused by every block of rows (no fresh large allocation per block):
    ``z`` the left-aligned rows, ``prod[0]`` the lagged products ``P_a(t)`` and ``prod[1]``
    their squares (one slab of rows per lag), ``pairs`` the Gram sums."""

    def __init__(self, rows: int, n_k: int, width: int) -> None:
        self.width = -(-width // DOT_BLOCK) * DOT_BLOCK
        self.z = np.empty(rows * self.width)
        self.prod = np.empty(2 * n_k * rows * self.width)
        self.pairs = np.empty(2 * rows * n_k * (n_k - 1) // 2)
        self.upper = np.triu_indices(n_k, 1)
        # incidence[a, p]: lag a is one of the pair p (to mark the lags in kept pairs)
        incidence = np.zeros((n_k, self.upper[0].size))
        incidence[self.upper[0], np.arange(self.upper[0].size)] = 1.0
        incidence[self.upper[1], np.arange(self.upper[0].size)] = 1.0
        self.incidence = incidence


def _aligned(res: Residuals, part: slice, buf: _Buffers) -> FloatMatrix:
    """Rows ``part`` of ``res.standard`` shifted left to their first observed residual, zeros
    in the columns freed on the right and up to the buffer's width, C-ordered."""
    start = res.start[part]
    values = res.standard
    width = values.shape[1]
    n_rows = part.stop - part.start
    z = buf.z[: n_rows * buf.width].reshape(n_rows, buf.width)
    if (start == start[0]).all():
        s0 = min(int(start[0]), width)
        z[:, : width - s0] = values[part, s0:]
        z[:, width - s0 :] = 0.0
        return z
    rows = np.arange(part.start, part.stop)
    cols = np.arange(buf.width)[None, :]
    values.reshape(-1).take((rows * width + start)[:, None] + cols, mode="clip", out=z)
    z[cols >= (width - start)[:, None]] = 0.0
    return z


def _products(
    z: FloatMatrix,
    width: int,
    lag_values: IntVector,
    tested: BoolMatrix,
    threshold: float,
    r_out: FloatMatrix,
    buf: _Buffers,
) -> tuple[np.ndarray, ...]:
    """Robust ``t~`` (zero where not tested), the tested lags, the kept pairs and the lags in
    kept pairs, per row of the left-aligned rows ``z`` (``width`` periods, then zeros); the
    kept ``r*_jk`` (``j < k``) go to ``r_out`` above the diagonal.

    ``P_a(t) = e_t e_{t-k}`` (``k`` the ``a``-th lag; 0 for ``t < k`` and where lag ``k`` is
    not tested), its sums, the tail sums ``S_a(m) = sum_{t >= m} P_a(t)^2`` at the lags, and
    for the pairs ``a < b`` the Gram sums ``sum_t P_a P_b`` and ``sum_t P_a^2 P_b^2`` (a dot
    product per series and pair, stacked over the later lags of each ``a``).
    """
    c, padded = z.shape
    n_k = lag_values.size
    # prod[0, a, i, t] = z_it z_i(t - k): each lag's slab is one product of the flattened rows
    # with themselves shifted by k, its first k columns (which would pair a row with the end
    # of the previous one) then zeroed.
    both = buf.prod[: 2 * n_k * c * padded].reshape(2, n_k, c, padded)
    prod, sq = both[0], both[1]
    flat = z.reshape(-1)
    for a, k in enumerate(lag_values):
        np.multiply(flat[k:], flat[:-k], out=prod[a].reshape(-1)[k:])
        prod[a, :, :k] = 0.0
        if not tested[:, a].all():
            prod[a] *= tested[:, a][:, None]
    np.multiply(prod, prod, out=sq)
    # suffix[b, a] = S_a(lag_b) = sum_{t >= lag_b} P_a(t)^2: the whole sum of each lag's
    # squares less its first lag_b terms. Both sums run over the row alone (its whole padded
    # length, or its first lag_b periods), so a row's tails depend on its own products only,
    # not on the other lags tested in the batch nor on the rows beside it (a fleet assessed in
    # chunks gets the whole's numbers).
    totals = sq.sum(axis=2)
    # Only the pairs a < b need S_a(lag_b); for a >= b the first lag_b terms are zeros
    # (P_a(t) = 0 for t < lag_a), so S_a(lag_a) = S_a(0) is the whole sum.
    suffix = np.empty((n_k, n_k, c))
    for b, lag in enumerate(lag_values.tolist()):
        if b:
            suffix[b, :b] = totals[:b] - sq[:b, :, :lag].sum(axis=2)
    total = totals  # S_a(lag_a) = S_a(0) = sum_t P_a(t)^2, (K, c)
    tested = tested & (total > 0).T  # a lag without an observed pair tests nothing
    with np.errstate(invalid="ignore", divide="ignore"):
        t = (prod[:, :, :width].sum(axis=2) / np.sqrt(total)).T
    t[~tested] = 0.0
    kept = np.zeros(c, dtype=np.int64)
    active = np.zeros((c, n_k), dtype=bool)
    if n_k < 2:
        return t, tested, kept, active
    # Pairs a < b (lags j < k): m = max(j, k) = lag_b, S_j(m) = S_a(lag_b), S_k(m) = S_b(0).
    ia, ib = buf.upper
    gram = buf.pairs[: 2 * ia.size * c].reshape(2, ia.size, c)  # sum P_a P_b, sum P_a^2 P_b^2
    at = 0
    for a in range(n_k - 1):
        k = n_k - a - 1
        np.vecdot(both[:, a : a + 1], both[:, a + 1 :], out=gram[:, at : at + k])
        at += k
    cross, quad = gram[0], gram[1]
    with np.errstate(invalid="ignore", divide="ignore"):
        r = cross / np.sqrt(suffix[ib, ia] * total[ib])
        tau = cross / np.sqrt(quad)
    keep = (tested[:, ia] & tested[:, ib]).T & (np.abs(tau) > threshold) & np.isfinite(r)
    pair, row = np.nonzero(keep)
    r_out[row, ia[pair], ib[pair]] = r[pair, row]
    kept[:] = keep.sum(axis=0)
    active[:] = (buf.incidence @ keep).T > 0  # counts of small integers: exact
    return t, tested, kept, active


def _forms(t: FloatMatrix, r_upper: np.ndarray, active: BoolMatrix) -> tuple[np.ndarray, ...]:
    """``Q~ = t~' R*^{-1} t~`` (``sum t~^2`` where ``R*`` is not positive definite), the
    smallest eigenvalue of ``R*`` and whether it is positive definite, per row.

    ``R*`` has unit diagonal and the kept ``r*_jk`` of ``r_upper`` (above the diagonal, mirrored)
    off it; ``active`` marks the lags in kept pairs. A lag in no kept pair has a unit row and
    column: it adds ``t~_k^2`` and an eigenvalue 1, so the eigenvalues and the solve run on the
    block of the active lags only (rows grouped by its size; ``R* = I`` needs neither, and a
    single pair ``r`` has the eigenvalues ``1 -+ r`` and ``Q~ = (t_j^2 - 2 r t_j t_k + t_k^2) /
    (1 - r^2)`` there).
    """
    n = t.shape[0]
    q = np.vecdot(t, t)
    eig = np.ones(n)
    ok = np.ones(n, dtype=bool)
    size = active.sum(axis=1)
    rows = np.flatnonzero(size)
    if rows.size == 0:
        return q, eig, ok
    rest = np.where(active[rows], 0.0, t[rows])
    rest = np.vecdot(rest, rest)  # sum of t~^2 over the lags in no kept pair
    size = size[rows]
    for s in np.unique(size):
        grp = np.flatnonzero(size == s)
        target = rows[grp]
        # The active lags of each row, ascending (row-major order of np.nonzero).
        idx = np.nonzero(active[target])[1].reshape(-1, s)
        tt = np.take_along_axis(t[target], idx, axis=1)
        if s == 2:  # one kept pair: eigenvalues 1 -+ r, and the 2 x 2 inverse in closed form
            r = r_upper[target, idx[:, 0], idx[:, 1]]
            ev = 1.0 - np.abs(r)
            with np.errstate(invalid="ignore", divide="ignore"):
                form = (tt[:, 0] ** 2 - 2.0 * r * tt[:, 0] * tt[:, 1] + tt[:, 1] ** 2) / (
                    (1.0 - r) * (1.0 + r)
                )
        else:
            block = r_upper[target[:, None, None], idx[:, :, None], idx[:, None, :]]
            block += block.transpose(0, 2, 1)
            diag = np.arange(s)
            block[:, diag, diag] = 1.0
            ev = np.linalg.eigvalsh(block)[:, 0]
            block[~(ev > PD_TOLERANCE)] = np.eye(s)
            form = np.vecdot(tt, np.linalg.solve(block, tt[:, :, None])[:, :, 0])
        good = ev > PD_TOLERANCE
        eig[target] = ev
        ok[target] = good
        q[target] = np.where(good, rest[grp] + form, q[target])
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
