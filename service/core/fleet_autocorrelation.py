"""Fleet autocorrelation: is there structure left at a lag across the fleet as a whole?

Many series each a little autocorrelated at the same lag (a seasonal term the model leaves out
everywhere, a lag-1 dynamic it misses) give per-series tests little to go on, while the fleet
says it clearly. The test pools the robust lag statistics of Dalla, Giraitis & Phillips (2022)
across series and judges their sum by its variance over time, as Driscoll & Kraay (1998) do for
a cross-sectional average: the cross-sectional sum per period is a time series, whose long-run
variance (equal-weighted cosine, Lazarus, Lewis, Stock & Watson 2018) allows for errors shared
across series.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from . import fleet_parts
from .batch import Residuals
from .ewc import cosine_projections, ewc_bins, ewc_variance
from .fleet_parts import FleetPart, combine
from .tails import t_sf_two_sided
from .types import BoolMatrix, FloatVector


@dataclass(frozen=True)
class FleetLagTest:
    """The pooled test at each tested lag (arrays of one entry per lag) and the decision.

    ``lags`` the lags, ``statistic`` and ``p_value`` (two-sided, Student t with ``df``) per
    lag, ``mean_acf`` the series' average autocorrelation there; ``p_value_min`` the smallest
    p-value times the number of lags (Bonferroni, at most 1), ``decisive_lag`` where it sits,
    ``series_used``.
    """

    lags: np.ndarray
    statistic: FloatVector
    p_value: FloatVector
    df: np.ndarray
    mean_acf: FloatVector
    p_value_min: float
    decisive_lag: int
    series_used: int


def fleet_lag_test(res: Residuals, tested: BoolMatrix, use: np.ndarray) -> FleetLagTest | None:
    """Pooled robust lag statistics over the series in ``use``, at each lag that at least half
    of them test (``tested[i, k - 1]``).

    For series ``i`` and lag ``k``, with ``e`` centred at the series' mean, the per-period terms
    ``x_it = (e_t e_{t-k} + s_i^2 / T_i) / sqrt(sum_t e_t^2 e_{t-k}^2)`` sum over ``t`` to the
    robust ``t~_ik`` of Dalla, Giraitis & Phillips (2022) plus ``sqrt(T - k) / T`` (about; the
    centring's bias of ``-s^2 / T`` per product removed, ``s^2 = sum e^2 / T``), so their sum has
    mean about 0 when no series is autocorrelated at ``k``. The series' average of those sums,
    ``theta_k = (1 / N) sum_i sum_t x_it = sum_t H_t`` with ``H_t = (1 / N) sum_i x_it`` on the
    calendar of the series aligned at their last period, is referred to its Driscoll-Kraay
    variance ``P Omega_H`` over the ``P`` periods, ``Omega_H`` the EWC long-run variance of ``H``:
    ``t_k = theta_k / sqrt(P Omega_H)`` on ``B = ewc_bins(P)`` degrees of freedom. ``None``
    when no lag is tested by half the series.

    The cross-sectional sums are taken block by block (:func:`fleet_lag_part` over each block
    of :data:`~service.core.fleet_parts.BLOCK` series, :func:`fleet_lag_from_parts` over their
    parts combined in order), so a fleet assessed in chunks gets the same numbers.
    """
    n = res.n_obs.shape[0]
    parts = [
        fleet_lag_part(
            res.rows(slice(lo, lo + fleet_parts.BLOCK)),
            tested[lo : lo + fleet_parts.BLOCK],
            use[lo : lo + fleet_parts.BLOCK],
        )
        for lo in range(0, max(n, 1), fleet_parts.BLOCK)
    ]
    return fleet_lag_from_parts(combine(parts))


def fleet_lag_part(res: Residuals, tested: BoolMatrix, use: np.ndarray) -> FleetPart:
    """One block's share of :func:`fleet_lag_test`: how many of its series in ``use`` test
    each lag (``sums["tested"]``, lag ``k`` at ``k - 1``) and, per lag ``k`` one of them tests,
    the sum of their terms ``x_it`` by period counted from the series' last period
    (``sums["h{k}"]``), how many have a term (``sums["m{k}"]``), the sum of their
    autocorrelations at ``k`` (``sums["acf{k}"]``) and the first and last period with a term
    (``lows``/``highs["q{k}"]``, counted from the end)."""
    z = res.standard
    obs = res.observed
    width = z.shape[1]
    rows = np.flatnonzero(use)
    counts = np.zeros(width, dtype=np.int64)
    k_max = min(tested.shape[1], width)
    counts[:k_max] = (tested[:, :k_max] & use[:, None]).sum(axis=0)
    sums: dict[str, np.ndarray] = {
        "tested": counts,
        "n_used": np.array([rows.size], dtype=np.int64),
    }
    lows: dict[str, int] = {}
    highs: dict[str, int] = {}
    if rows.size == 0 or tested.shape[1] == 0:
        return FleetPart(sums=sums)
    n = res.n_obs[rows]
    lengths = res.lengths[rows]
    every = rows.size == use.shape[0]
    zr = z if every else z[rows]  # the block's rows in use (all of them: a view)
    gamma0 = res.lag_products(0) if every else res.lag_products(0)[rows]
    with np.errstate(invalid="ignore", divide="ignore"):
        s2 = gamma0 / n
        shift = s2 / n
    obs_r = obs if every else obs[rows]
    tested_r = tested if every else tested[rows]
    length = int(lengths[0])
    aligned = bool((lengths == length).all())  # the block's series end in one period
    starts = res.start[rows]
    first = int(starts[0]) if starts.size else 0
    # Every series of the block observed from one period to its last without a gap: the
    # observed pairs at lag k are then the columns first..length - 1 - k of the products.
    plain = aligned and bool((starts == first).all() and (res.n_missing[rows] == 0).all())
    x = np.empty((rows.size, max(width - 1, 0)))
    for k in (np.flatnonzero(counts[:k_max]) + 1).tolist():
        if k >= width:
            continue
        every_row = bool(tested_r[:, k - 1].all())
        prod = zr[:, k:] * zr[:, :-k]
        if plain:
            # Outside the observed pairs one factor is 0, so the product is already 0.
            top = length - 1 - k
            if not every_row:
                prod[~tested_r[:, k - 1]] = 0.0
            pairs = None
        else:
            pairs = obs_r[:, k:] & obs_r[:, :-k] & tested_r[:, k - 1][:, None]
            if not pairs.all():
                prod[~pairs] = 0.0
        norm = np.sqrt(np.vecdot(prod, prod))
        ok = norm > 0
        xk = x[:, : width - k]
        with np.errstate(invalid="ignore", divide="ignore"):
            np.add(prod, shift[:, None], out=xk)
            xk /= norm[:, None]
            if pairs is None:
                xk[:, : min(first, width - k)] = 0.0
                xk[:, max(top + 1, 0) :] = 0.0
                if not (every_row and ok.all()):
                    xk[~(ok & tested_r[:, k - 1])] = 0.0
            elif not (pairs.all() and ok.all()):
                xk[~(pairs & ok[:, None])] = 0.0
            acf = np.where(ok, prod.sum(axis=1) / gamma0, 0.0)
        members = int(ok.sum())
        if members == 0:
            continue
        sums[f"m{k}"] = np.array([members], dtype=np.int64)
        sums[f"acf{k}"] = np.array([acf[ok].sum()])
        h = np.zeros(width)
        if aligned:
            # Column c of x is period c + k of every series: q = length - 1 - k - c.
            top = length - 1 - k
            if pairs is None:
                # Only the columns first..top can hold a term; a column with a non-zero sum
                # holds one, one summing to 0 is looked at.
                if first > top:
                    continue
                columns = np.zeros(top + 1)
                columns[first:] = xk[:, first : top + 1].sum(axis=0)
                held = columns[first:] != 0
                if not held.all():
                    held |= xk[:, first : top + 1].any(axis=0)
                used = np.flatnonzero(held) + first
            else:
                used = np.flatnonzero(xk.any(axis=0))
                if used.size == 0:
                    continue
                columns = xk[:, : top + 1].sum(axis=0)
            if used.size == 0:
                continue
            h[: top + 1] = columns[::-1]
            lo, hi = top - int(used[-1]), top - int(used[0])
        else:
            r_i, c_i = np.nonzero(xk)
            if r_i.size == 0:
                continue
            q = lengths[r_i] - 1 - (c_i + k)
            h += np.bincount(q, weights=xk[r_i, c_i], minlength=width)[:width]
            lo, hi = int(q.min()), int(q.max())
        sums[f"h{k}"] = h
        lows[f"q{k}"] = lo
        highs[f"q{k}"] = hi
    return FleetPart(sums=sums, lows=lows, highs=highs)


def fleet_lag_from_parts(part: FleetPart) -> FleetLagTest | None:
    """:func:`fleet_lag_test` from the :func:`fleet_lag_part` of its blocks combined in order
    (the terms' sums divided by the number of series with a term, ``H_t``, then the test)."""
    sums = part.sums
    n_used = int(sums["n_used"][0]) if "n_used" in sums else 0
    if n_used == 0:
        return None
    share_tested = sums["tested"] / n_used
    lags = np.flatnonzero(share_tested >= 0.5) + 1
    if lags.size == 0:
        return None
    stats = np.full(lags.size, np.nan)
    pvals = np.full(lags.size, np.nan)
    dfs = np.zeros(lags.size, dtype=np.int64)
    acfs = np.full(lags.size, np.nan)
    for j, k in enumerate(lags.tolist()):
        if f"h{k}" not in sums:
            continue
        members = int(sums[f"m{k}"][0])
        lo, hi = part.lows[f"q{k}"], part.highs[f"q{k}"]
        # H on the calendar (oldest first) from its first to its last period with a term.
        h = sums[f"h{k}"][lo : hi + 1][::-1] / members
        span = np.array([hi - lo + 1])
        b = ewc_bins(span)
        if span[0] < 3 or b[0] < 1:
            continue
        lam = cosine_projections(h[None, :], span, b)
        omega = float(ewc_variance(lam, b)[0])
        theta = float(h.sum())
        se = np.sqrt(max(omega, 0.0) * span[0])
        if not se > 0:
            continue
        stats[j] = theta / se
        dfs[j] = int(b[0])
        pvals[j] = float(t_sf_two_sided(np.array(stats[j]), float(b[0])))
        acfs[j] = float(sums[f"acf{k}"][0]) / members
    finite = np.isfinite(pvals)
    if not finite.any():
        return None
    best = int(np.nanargmin(pvals))
    return FleetLagTest(
        lags=lags,
        statistic=stats,
        p_value=pvals,
        df=dfs,
        mean_acf=acfs,
        p_value_min=float(min(1.0, pvals[best] * int(finite.sum()))),
        decisive_lag=int(lags[best]),
        series_used=n_used,
    )
