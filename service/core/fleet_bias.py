"""Fleet bias: is the weighted mean of the series' mean errors zero, allowing for errors that
move together across series (a common shock)?

Source: Driscoll & Kraay (1998), "Consistent covariance matrix estimation with spatially
dependent panel data", Review of Economics and Statistics 80(4), 549-560: the variance of a
cross-sectional average from the time series of cross-sectional sums of the moment conditions;
its long-run variance here by the equal-weighted cosine estimator with t critical values of
Lazarus, Lewis, Stock & Watson (2018) (:mod:`service.core.ewc`).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .batch import Residuals
from .ewc import EWC_MIN_OBS, cosine_projections, ewc_bins, ewc_variance
from .fleet_parts import FleetPart, block_exponent
from .residual_arrays import CHUNK_ELEMENTS, align_left, as_residuals
from .results import skip_reasons_and_ran
from .tails import norm_sf_two_sided, t_ppf, t_sf_two_sided
from .types import FloatMatrix, FloatVector, InputError, IntVector, ObjectVector


@dataclass(frozen=True, eq=False)
class FleetBias:
    """One entry per fleet (``NaN`` where ``skip_reason`` is set).

    ``theta`` the weighted mean error, ``std_error`` its Driscoll-Kraay standard error, ``t``
    and ``p_value`` (two-sided, Student t with ``df = bins``), ``ci_low``/``ci_high`` at
    ``ci_level``; ``n_periods`` the calendar periods spanned, ``n_series`` the series used;
    ``naive_std_error``, ``naive_z`` and ``naive_p_value`` the test that treats the series as
    independent (for comparison).
    """

    theta: FloatVector
    std_error: FloatVector
    t: FloatVector
    df: IntVector
    p_value: FloatVector
    ci_low: FloatVector
    ci_high: FloatVector
    ci_level: float
    bins: IntVector
    n_periods: IntVector
    n_series: IntVector
    naive_std_error: FloatVector
    naive_z: FloatVector
    naive_p_value: FloatVector
    skip_reason: ObjectVector


MAX_ALIGNED_GROUPS = 64
"""Most (fleet, calendar offset) groups of series summed by one matrix-vector product each."""


def end_aligned_offsets(res: Residuals) -> IntVector:
    """Calendar position of column 0 of each row when the series' last training periods
    coincide (counted by position from the end): ``max(lengths) - lengths``."""
    lengths = res.lengths
    return (lengths.max(initial=0) - lengths).astype(np.int64)


def _calendar_sums(
    values: FloatMatrix,
    coef: FloatVector,
    fleet: IntVector,
    offsets: IntVector,
    n_fleets: int,
    n_cal: int,
) -> FloatMatrix:
    """``H[g, p] = sum_i coef_i values[i, p - offsets_i]`` over the rows ``i`` of fleet ``g``
    (shape ``(n_fleets, n_cal)``; ``values`` is 0 where a residual is missing, ``coef`` 0 for a
    row left out, and row ``i`` ends by ``n_cal - offsets_i``).

    Rows sharing a fleet and an offset (an aligned fleet has one such group) are summed by a
    matrix-vector product each; with more groups than :data:`MAX_ALIGNED_GROUPS`, by a
    weighted count over the calendar positions, in blocks of rows.
    """
    n_rows, width = values.shape
    h = np.zeros((n_fleets, n_cal + width))  # room for a row's padding past its end
    key = fleet * (n_cal + 1) + offsets
    groups, inverse = np.unique(key, return_inverse=True)
    if groups.size <= MAX_ALIGNED_GROUPS:
        for k, gk in enumerate(groups):
            g, off = divmod(int(gk), n_cal + 1)
            if groups.size == 1:
                h[g, off : off + width] += coef @ values
                continue
            rows = np.flatnonzero(inverse == k)
            h[g, off : off + width] += coef[rows] @ values[rows]
        return h[:, :n_cal]
    flat = h.reshape(-1)
    step = max(1, CHUNK_ELEMENTS // max(width, 1))
    cols = np.arange(width)[None, :]
    for lo in range(0, n_rows, step):  # blocks of rows: bounded temporaries
        part = slice(lo, min(lo + step, n_rows))
        pos = (fleet[part] * (n_cal + width) + offsets[part])[:, None] + cols
        flat += np.bincount(
            pos.reshape(-1),
            weights=(coef[part, None] * values[part]).reshape(-1),
            minlength=flat.size,
        )[: flat.size]
    return h[:, :n_cal]


def fleet_bias(
    res: Residuals | np.ndarray,
    weights: FloatVector,
    *,
    offsets: IntVector | None = None,
    fleet: IntVector | None = None,
    bins: int | None = None,
    ci_level: float = 0.95,
    min_obs: int = EWC_MIN_OBS,
) -> FleetBias:
    """Driscoll-Kraay test that the fleet's weighted mean error is zero.

    With shares ``s_i = w_i / sum w`` over the series used (those with at least ``min_obs``
    residuals), ``theta = sum_i s_i mean_i`` and, on a common calendar of periods ``t``,
    ``H_t = sum_i s_i (e_it - mean_i) / T_i`` over the series observed at ``t``
    (``T_i = n_obs``). ``theta = sum_t G_t`` with ``G_t = sum_i s_i e_it / T_i``, so its
    variance is ``N`` times the long-run variance of the ``N``-period series ``H_t``
    (Driscoll & Kraay 1998, with the EWC estimator for that long-run variance):
    ``SE^2 = N Omega_H``, ``Omega_H = (1/B) sum_{j=1..B} Lambda_j(H)^2``, ``t = theta / SE``
    referred to Student's t with ``B = ewc_bins(N)`` degrees of freedom (or ``bins``);
    ``N`` counts the periods from the fleet's first to its last observed period (a period
    inside with no observation has ``H_t = 0``).

    ``offsets[i]`` is the calendar position of column 0 of row ``i`` (a caller with timestamps
    passes them); default :func:`end_aligned_offsets`. ``fleet[i]`` (integers ``0..G-1``)
    assigns series to fleets, each tested separately (default: one fleet).

    The naive comparison treats the series as independent and each as white noise:
    ``SE_naive^2 = sum_i s_i^2 v_i / T_i`` with ``v_i`` the sample variance (``ddof = 1``),
    ``z = theta / SE_naive`` referred to the normal.

    With all series identical copies, ``SE`` equals the single-series EWC standard error of
    :func:`service.core.ewc.ewc_bias`; with one series, the test is that one.
    """
    if not 0 < ci_level < 1:
        raise InputError("ci_level", f"must lie strictly between 0 and 1, got {ci_level}")
    if bins is not None and bins < 1:
        raise InputError("bins", f"must be at least 1, got {bins}")
    res = as_residuals(res)
    n_series, width = res.values.shape
    w = np.asarray(weights, dtype=float).reshape(-1)
    if w.shape != (n_series,):
        raise InputError("weights", f"has {w.shape[0]} entries, expected {n_series}")
    if not np.isfinite(w).all() or (w < 0).any():
        bad = int(np.argmax(~np.isfinite(w) | (w < 0)))
        raise InputError("weights", "must be finite and non-negative", index=bad)
    if offsets is None:
        off = end_aligned_offsets(res)
    else:
        off = np.asarray(offsets).reshape(-1)
        if off.shape != (n_series,) or not np.issubdtype(off.dtype, np.integer):
            raise InputError("offsets", f"expected {n_series} integer calendar positions")
        if (off < 0).any():
            raise InputError("offsets", "must be 0 or more", index=int(np.argmax(off < 0)))
        off = off.astype(np.int64)
    if fleet is None:
        g = np.zeros(n_series, dtype=np.int64)
    else:
        g = np.asarray(fleet).reshape(-1)
        if g.shape != (n_series,) or not np.issubdtype(g.dtype, np.integer) or (g < 0).any():
            raise InputError("fleet", f"expected {n_series} non-negative integer fleet labels")
        g = g.astype(np.int64)
    n_fleets = int(g.max(initial=-1)) + 1

    n = res.n_obs
    used = (n >= max(min_obs, 2)) & (w > 0)
    w_used = np.where(used, w, 0.0)
    total = np.bincount(g, weights=w_used, minlength=n_fleets)
    with np.errstate(invalid="ignore", divide="ignore"):
        share = np.where(used, w_used / total[g], 0.0)
    safe_n = np.maximum(n, 1).astype(float)
    mean = np.where(used, res.mean, 0.0)
    theta = np.bincount(g, weights=share * mean, minlength=n_fleets)

    # H on the calendar, one row per fleet, in units of `scale` (largest |H| contribution).
    coef = share / safe_n  # s_i / T_i
    n_cal = int((off + res.lengths).max(initial=0))
    # Largest |H| contribution, to work in its units (no overflow in the squares): res.unit is
    # the largest |centred| of a row, except for a row of zeros (whose largest is 0).
    nonzero = res.lag_products(0) > 0
    with np.errstate(invalid="ignore", over="ignore"):
        scale = float(np.max(np.abs(coef) * np.where(nonzero, res.unit, 0.0), initial=0.0))
    scale = scale if scale > 0 else 1.0
    # Each used series' first and last observed residual on the calendar.
    last_obs = res.lengths - 1
    trailing = np.flatnonzero(used & (res.n_missing > 0))  # a gap may end the span
    if trailing.size:
        last_obs[trailing] = width - 1 - np.argmax(res.observed[trailing, ::-1], axis=1)
    first = np.full(n_fleets, n_cal, dtype=np.int64)
    last = np.full(n_fleets, -1, dtype=np.int64)
    np.minimum.at(first, g[used], (off + res.start)[used])
    np.maximum.at(last, g[used], (off + last_obs)[used])
    h = _calendar_sums(res.centred, (coef / scale) * used, g, off, n_fleets, n_cal)
    h = h.reshape(n_fleets, n_cal)
    n_periods = np.maximum(last - first + 1, 0)
    b = ewc_bins(n_periods)
    if bins is not None:
        b = np.minimum(int(bins), np.maximum(n_periods - 1, 0)).astype(np.int64)
    lam = cosine_projections(align_left(h, np.minimum(first, max(n_cal - 1, 0))), n_periods, b)
    omega = ewc_variance(lam, b)
    n_used = np.bincount(g, weights=used.astype(float), minlength=n_fleets).astype(np.int64)

    # In units of ``scale`` (as H above), so squares of values near the accepted magnitude
    # neither overflow nor underflow.
    with np.errstate(invalid="ignore", over="ignore"):
        var_i = res.lag_products(0) * (res.unit / scale) ** 2
        var_i = var_i / np.maximum(n - 1, 1)
        naive_var = np.bincount(
            g, weights=np.where(used, share * share * var_i / safe_n, 0.0), minlength=n_fleets
        )
    with np.errstate(invalid="ignore", over="ignore"):
        se = scale * np.sqrt(np.maximum(omega, 0.0) * n_periods)
    return _result(theta, se, b, n_periods, n_used, naive_var, scale, ci_level, min_obs)


def fleet_bias_part(
    res: Residuals,
    weights: FloatVector,
    *,
    min_obs: int = EWC_MIN_OBS,
    counts: FloatVector | None = None,
) -> FleetPart:
    """One block's share of :func:`fleet_bias_from_parts` (the end-aligned single fleet of the
    bias check): per series the weight, ``n_obs``, mean, unit, sum of squares, first and last
    observed residual and length; and ``H`` summed over the block's series on the calendar
    counted from the fleet's last period (``scaled["h"]``, in units of a power of two: each
    term ``(w_i / T_i) (e_it - mean_i)`` is ``m_i 2^(k_i)`` times ``e`` over its row's unit, so
    no product overflows). ``counts`` (1 for a series the fleet counts, else 0) adds
    ``scaled["h_count"]``, the same sum with those weights, which the fleet uses when no series
    has a positive weight."""
    width = res.values.shape[1]
    w = np.asarray(weights, dtype=float)
    n = res.n_obs
    ss = res.lag_products(0)
    last_obs = res.lengths.astype(np.int64)  # a copy
    last_obs -= 1
    trailing = np.flatnonzero(res.n_missing > 0)  # a gap may end the span
    if trailing.size:
        last_obs[trailing] = width - 1 - np.argmax(res.observed[trailing, ::-1], axis=1)
    rows = {
        "w": w,
        **({} if counts is None else {"counts": np.asarray(counts, dtype=float)}),
        "n_obs": n,
        "mean": res.mean,
        "unit": res.unit,
        "ss": ss,
        "start": res.start,
        "last_obs": last_obs,
        "lengths": res.lengths,
    }
    scaled = {}
    weightings = [("h", w)] if counts is None else [("h", w), ("h_count", counts)]
    for key, wk in weightings:
        found = _calendar_part(res, wk, ss, min_obs)
        if found is not None:
            scaled[key] = found
    return FleetPart(rows=rows, scaled=scaled)


def _coefficients(w: FloatVector, n: IntVector, unit: FloatVector) -> tuple[FloatVector, IntVector]:
    """``(w_i / T_i) unit_i`` as mantissa and binary exponent (the product never formed)."""
    with np.errstate(invalid="ignore", divide="ignore"):
        m1, e1 = np.frexp(w / np.maximum(n, 1).astype(float))
    m2, e2 = np.frexp(unit)
    return m1 * m2, (e1.astype(np.int64) + e2.astype(np.int64))


def _contributing(w: FloatVector, n: IntVector, ss: FloatVector, min_obs: int) -> np.ndarray:
    return (n >= max(min_obs, 2)) & (w > 0) & (ss > 0)


def _calendar_part(
    res: Residuals, w: FloatVector, ss: FloatVector, min_obs: int
) -> tuple[np.ndarray, int] | None:
    """``sum_i c_i z_it`` by period counted from the end (index 0 the last period), in units
    of ``2^E``, over the block's contributing rows; ``None`` when none contributes."""
    rows = np.flatnonzero(_contributing(w, res.n_obs, ss, min_obs))
    if rows.size == 0:
        return None
    width = res.values.shape[1]
    mant, expo = _coefficients(w[rows], res.n_obs[rows], res.unit[rows])
    coef, top = block_exponent(mant, expo)
    terms = coef[:, None] * res.standard[rows]
    lengths = res.lengths[rows]
    out = np.zeros(width)
    length = int(lengths[0])
    if (lengths == length).all():
        out[:length] = terms[:, :length].sum(axis=0)[::-1]
        return out, top
    q = lengths[:, None] - 1 - np.arange(width)[None, :]
    inside = q >= 0
    out += np.bincount(q[inside], weights=terms[inside], minlength=width)[:width]
    return out, top


def fleet_bias_from_parts(
    part: FleetPart,
    *,
    counted: bool = False,
    min_obs: int = EWC_MIN_OBS,
    ci_level: float = 0.95,
) -> FleetBias:
    """:func:`fleet_bias` of one fleet aligned at its series' last periods, from the
    :func:`fleet_bias_part` of its blocks combined in order
    (:func:`~service.core.fleet_parts.combine`): the same formulas, with ``H`` summed block by
    block, so a fleet assessed in chunks gets the numbers of the whole. ``counted``: weigh the
    series by the parts' ``counts`` (their ``h_count`` sums) instead of their weights."""
    rows = part.rows
    w = rows["counts"] if counted else rows["w"]
    n = rows["n_obs"]
    unit = rows["unit"]
    ss = rows["ss"]
    lengths = rows["lengths"]
    key = "h_count" if counted else "h"
    n_series = n.shape[0]
    zeros = np.zeros(n_series, dtype=np.int64)
    used = (n >= max(min_obs, 2)) & (w > 0)
    w_used = np.where(used, w, 0.0)
    total = np.bincount(zeros, weights=w_used, minlength=1)
    with np.errstate(invalid="ignore", divide="ignore"):
        share = np.where(used, w_used / total[0], 0.0)
    safe_n = np.maximum(n, 1).astype(float)
    mean = np.where(used, rows["mean"], 0.0)
    theta = np.bincount(zeros, weights=share * mean, minlength=1)
    n_cal = int(lengths.max(initial=0))
    width = 0
    h_end = np.zeros(0)
    scale = 1.0
    contrib = _contributing(w, n, ss, min_obs)
    if contrib.any() and key in part.scaled:
        acc, top = part.scaled[key]
        width = acc.shape[0]
        mant, expo = _coefficients(w[contrib], n[contrib], unit[contrib])
        relative = float(np.ldexp(mant, (expo - top).astype(np.int32)).max())
        h_end = acc / relative
        t_mant, t_exp = np.frexp(total[0])
        scale = float(np.ldexp(relative / t_mant, top - int(t_exp)))
    off = n_cal - lengths
    first = int(np.min((off + rows["start"])[used], initial=n_cal))
    last = int(np.max((off + rows["last_obs"])[used], initial=-1))
    n_periods = np.array([max(last - first + 1, 0)], dtype=np.int64)
    b = ewc_bins(n_periods)
    seg = np.zeros((1, max(int(n_periods[0]), 1)))
    if n_periods[0] > 0 and width:
        lo, hi = n_cal - 1 - last, n_cal - first
        seg[0, : hi - lo] = h_end[lo:hi][::-1]
    lam = cosine_projections(seg, n_periods, b)
    omega = ewc_variance(lam, b)
    n_used = np.array([int(used.sum())], dtype=np.int64)
    with np.errstate(invalid="ignore", over="ignore"):
        var_i = ss * (unit / scale) ** 2
        var_i = var_i / np.maximum(n - 1, 1)
        naive_var = np.bincount(
            zeros, weights=np.where(used, share * share * var_i / safe_n, 0.0), minlength=1
        )
    with np.errstate(invalid="ignore", over="ignore"):
        se = scale * np.sqrt(np.maximum(omega, 0.0) * n_periods)
    return _result(theta, se, b, n_periods, n_used, naive_var, scale, ci_level, min_obs)


def _result(
    theta: np.ndarray,
    se: np.ndarray,
    b: np.ndarray,
    n_periods: np.ndarray,
    n_used: np.ndarray,
    naive_var: np.ndarray,
    scale: float,
    ci_level: float,
    min_obs: int,
) -> FleetBias:
    """The test from its parts (the last steps of :func:`fleet_bias`)."""
    n_fleets = theta.shape[0]
    reasons, ran = skip_reasons_and_ran(
        n_fleets,
        (n_used == 0, f"no series with {max(min_obs, 2)} residuals and a positive weight"),
        (n_periods < EWC_MIN_OBS, f"fewer than {EWC_MIN_OBS} periods"),
        (~(se > 0) & (theta == 0), "residuals are all zero"),
    )
    df = np.maximum(b, 1).astype(float)
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        t = np.where(se > 0, theta / se, np.sign(theta) * np.inf)
        p = t_sf_two_sided(t, df)
        q = t_ppf(0.5 + ci_level / 2.0, df)
        naive_se = scale * np.sqrt(naive_var)
        z = np.where(naive_se > 0, theta / naive_se, np.sign(theta) * np.inf)
    nan = np.full(n_fleets, np.nan)

    def keep(x: np.ndarray) -> np.ndarray:
        return np.where(ran, x, nan)

    return FleetBias(
        theta=keep(theta),
        std_error=keep(se),
        t=keep(t),
        df=np.where(ran, b, 0),
        p_value=keep(p),
        ci_low=keep(theta - q * se),
        ci_high=keep(theta + q * se),
        ci_level=ci_level,
        bins=np.where(ran, b, 0),
        n_periods=n_periods,
        n_series=n_used,
        naive_std_error=keep(naive_se),
        naive_z=keep(z),
        naive_p_value=keep(norm_sf_two_sided(z)),
        skip_reason=reasons,
    )
