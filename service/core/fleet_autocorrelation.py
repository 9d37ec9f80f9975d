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

from .batch import Residuals
from .ewc import cosine_projections, ewc_bins, ewc_variance
from .residual_arrays import align_left
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
    """
    n_used = int(use.sum())
    if n_used == 0 or tested.shape[1] == 0:
        return None
    share_tested = (tested & use[:, None]).sum(axis=0) / n_used
    lags = np.flatnonzero(share_tested >= 0.5) + 1
    if lags.size == 0:
        return None
    z = res.standard
    obs = res.observed
    n = res.n_obs
    width = z.shape[1]
    rows = np.flatnonzero(use)
    offsets = (res.lengths.max(initial=0) - res.lengths)[rows]
    n_cal = int((offsets + res.lengths[rows]).max(initial=0))
    with np.errstate(invalid="ignore", divide="ignore"):
        s2 = np.vecdot(z[rows], z[rows]) / n[rows]
    stats = np.full(lags.size, np.nan)
    pvals = np.full(lags.size, np.nan)
    dfs = np.zeros(lags.size, dtype=np.int64)
    acfs = np.full(lags.size, np.nan)
    zr = z[rows]
    obs_r = obs[rows]
    gamma0 = np.vecdot(zr, zr)
    shift = s2 / n[rows]
    aligned = not offsets.any()  # every series ends in the same period: no realignment
    for j, k in enumerate(lags.tolist()):
        if k >= width:
            continue
        pairs = obs_r[:, k:] & obs_r[:, :-k] & tested[rows, k - 1][:, None]
        prod = zr[:, k:] * zr[:, :-k]
        every_pair = bool(pairs.all())  # no gap: nothing to clear
        if not every_pair:
            prod[~pairs] = 0.0
        norm = np.sqrt(np.vecdot(prod, prod))
        ok = norm > 0
        with np.errstate(invalid="ignore", divide="ignore"):
            x = prod + shift[:, None]
            x /= norm[:, None]
            if not (every_pair and ok.all()):
                x[~(pairs & ok[:, None])] = 0.0
            acf = np.where(ok, prod.sum(axis=1) / gamma0, np.nan)
        members = int(ok.sum())
        if members == 0:
            continue
        if aligned:
            # Column by column, rows added in order: the sums bincount makes below.
            used = np.flatnonzero(x.any(axis=0))
            if used.size == 0:
                continue
            h = np.zeros(n_cal)
            h[k : k + x.shape[1]] = (x / members).sum(axis=0)
            first, last = int(used[0]) + k, int(used[-1]) + k
        else:
            r_i, c_i = np.nonzero(x)
            if r_i.size == 0:
                continue
            pos = offsets[r_i] + c_i + k
            weights = x[r_i, c_i] / members
            h = np.bincount(pos, weights=weights, minlength=n_cal)  # type: ignore[assignment]
            first, last = int(pos.min()), int(pos.max())
        span = np.array([max(last - first + 1, 0)])
        b = ewc_bins(span)
        if span[0] < 3 or b[0] < 1:
            continue
        lam = cosine_projections(
            align_left(np.asarray(h, dtype=float)[None, :], np.array([first])), span, b
        )
        omega = float(ewc_variance(lam, b)[0])
        theta = float(h.sum())
        se = np.sqrt(max(omega, 0.0) * span[0])
        if not se > 0:
            continue
        stats[j] = theta / se
        dfs[j] = int(b[0])
        pvals[j] = float(t_sf_two_sided(np.array(stats[j]), float(b[0])))
        acfs[j] = float(np.nanmean(acf))
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
