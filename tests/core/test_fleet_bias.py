"""Driscoll-Kraay fleet bias with the EWC long-run variance: identities and a direct loop."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from service.core import InputError
from service.core import fleet_bias as fleet_module
from service.core.ewc import ewc_bias, ewc_bins
from service.core.fleet_bias import end_aligned_offsets, fleet_bias

from .reference_data import observed, residuals

RTOL = 1e-8


def direct_fleet(rows, weights, offsets, min_obs=3, level=0.95):
    """Plain loop implementation: H_t over the calendar, EWC on its active span."""
    used = [i for i, r in enumerate(rows) if observed(r).size >= min_obs and weights[i] > 0]
    total = sum(weights[i] for i in used)
    theta = 0.0
    cal = {}
    naive_var = 0.0
    for i in used:
        r = np.asarray(rows[i], dtype=float)
        e = observed(r)
        s = weights[i] / total
        mean = e.mean()
        theta += s * mean
        naive_var += s * s * e.var(ddof=1) / e.size
        for col, v in enumerate(r):
            if not np.isnan(v):
                pos = offsets[i] + col
                cal[pos] = cal.get(pos, 0.0) + s * (v - mean) / e.size
    first, last = min(cal), max(cal)
    h = [cal.get(p, 0.0) for p in range(first, last + 1)]
    n = len(h)
    b = int(ewc_bins(n))
    lam = [
        np.sqrt(2 / n) * sum(np.cos(np.pi * j * (t - 0.5) / n) * h[t - 1] for t in range(1, n + 1))
        for j in range(1, b + 1)
    ]
    se = np.sqrt(n * np.mean(np.square(lam)))
    t = theta / se
    q = stats.t.ppf(0.5 + level / 2, b)
    return {
        "theta": theta,
        "se": se,
        "t": t,
        "p": 2 * stats.t.sf(abs(t), b),
        "b": b,
        "n": n,
        "low": theta - q * se,
        "high": theta + q * se,
        "naive_se": np.sqrt(naive_var),
        "n_series": len(used),
    }


def test_identical_copies_give_the_single_series_ewc_variance():
    # All series the same e_t: H_t = (e_t - mean) / T, so N Omega_H = Omega_e / T.
    rng = np.random.default_rng(1)
    e = rng.normal(0.2, 1.0, 60)
    result = fleet_bias(np.tile(e, (7, 1)), rng.uniform(1, 5, 7))
    single = ewc_bias(e[None, :])
    np.testing.assert_allclose(result.std_error[0], single.details["std_error"][0], rtol=1e-12)
    np.testing.assert_allclose(result.t[0], single.statistic[0], rtol=1e-12)
    np.testing.assert_allclose(result.theta[0], e.mean(), rtol=1e-12)


def test_one_series_is_the_single_series_test():
    rng = np.random.default_rng(2)
    e = rng.normal(-0.3, 2.0, 45)
    result = fleet_bias(e[None, :], np.array([3.0]), ci_level=0.9)
    single = ewc_bias(e[None, :], ci_level=0.9)
    np.testing.assert_allclose(result.t[0], single.statistic[0], rtol=1e-12)
    np.testing.assert_allclose(result.p_value[0], single.p_value[0], rtol=1e-12)
    np.testing.assert_allclose(result.ci_low[0], single.details["ci_low"][0], rtol=1e-12)
    np.testing.assert_allclose(result.ci_high[0], single.details["ci_high"][0], rtol=1e-12)
    assert result.df[0] == single.details["df"][0] == 5


@pytest.mark.parametrize("groups", [64, 0])  # one product per offset group / calendar counts
def test_matches_direct_loop_with_ragged_series_gaps_and_two_fleets(groups, monkeypatch):
    monkeypatch.setattr(fleet_module, "MAX_ALIGNED_GROUPS", groups)
    rng = np.random.default_rng(3)
    lengths = [52, 40, 60, 30, 2, 52, 45]
    common = rng.normal(size=60)
    rows = [0.1 + common[-n:] * 0.5 + rng.normal(size=n) for n in lengths]
    rows[1][[3, 17]] = np.nan
    rows[2][:5] = np.nan
    rows[6][-2:] = np.nan  # the last two residuals missing: the span ends before the actuals
    weights = np.array([1.0, 2.0, 0.5, 4.0, 1.0, 0.0, 3.0])
    fleet = np.array([0, 0, 0, 1, 0, 1, 1])
    res = residuals(rows)
    result = fleet_bias(res, weights, fleet=fleet)
    offsets = end_aligned_offsets(res)
    # The default aligns the last observed periods: offsets are max(length) - length.
    np.testing.assert_array_equal(offsets, max(lengths) - np.array(lengths))
    for g in (0, 1):
        members = [i for i in range(len(rows)) if fleet[i] == g]
        ref = direct_fleet(
            [rows[i] for i in members], weights[members], offsets[members], level=0.95
        )
        np.testing.assert_allclose(result.theta[g], ref["theta"], rtol=RTOL)
        np.testing.assert_allclose(result.std_error[g], ref["se"], rtol=RTOL)
        np.testing.assert_allclose(result.t[g], ref["t"], rtol=RTOL)
        np.testing.assert_allclose(result.p_value[g], ref["p"], rtol=RTOL)
        np.testing.assert_allclose(result.ci_low[g], ref["low"], rtol=RTOL)
        np.testing.assert_allclose(result.ci_high[g], ref["high"], rtol=RTOL)
        np.testing.assert_allclose(result.naive_std_error[g], ref["naive_se"], rtol=RTOL)
        z = ref["theta"] / ref["naive_se"]
        np.testing.assert_allclose(result.naive_z[g], z, rtol=RTOL)
        np.testing.assert_allclose(result.naive_p_value[g], 2 * stats.norm.sf(abs(z)), rtol=RTOL)
        assert result.df[g] == ref["b"] and result.n_periods[g] == ref["n"]
        assert result.n_series[g] == ref["n_series"]
    # The two-value series and the zero-weight one are left out.
    assert list(result.n_series) == [3, 2]


@pytest.mark.parametrize("groups", [64, 0])
def test_caller_offsets_place_series_on_a_calendar(groups, monkeypatch):
    monkeypatch.setattr(fleet_module, "MAX_ALIGNED_GROUPS", groups)
    rng = np.random.default_rng(4)
    rows = [rng.normal(size=20), rng.normal(size=30), rng.normal(size=25)]
    offsets = np.array([10, 0, 40])  # the third starts after the others end: a hole
    weights = np.array([1.0, 1.0, 2.0])
    result = fleet_bias(residuals(rows), weights, offsets=offsets)
    ref = direct_fleet(rows, weights, offsets)
    assert result.n_periods[0] == ref["n"] == 65
    np.testing.assert_allclose(result.std_error[0], ref["se"], rtol=RTOL)
    np.testing.assert_allclose(result.theta[0], ref["theta"], rtol=RTOL)


def test_skips_and_bad_input():
    rows = [np.array([1.0, 2.0]), np.random.default_rng(5).normal(size=10)]
    result = fleet_bias(residuals(rows), np.array([1.0, 1.0]), fleet=np.array([0, 1]))
    assert result.skip_reason[0].startswith("no series with 3 residuals")
    assert np.isnan(result.t[0]) and result.skip_reason[1] is None
    res = residuals(rows)
    for kwargs, name in (
        ({"weights": np.ones(3)}, "weights"),
        ({"weights": np.array([1.0, -1.0])}, "weights"),
        ({"weights": np.ones(2), "offsets": np.array([0, -1])}, "offsets"),
        ({"weights": np.ones(2), "offsets": np.array([0.5, 1.0])}, "offsets"),
        ({"weights": np.ones(2), "fleet": np.array([0, -1])}, "fleet"),
        ({"weights": np.ones(2), "ci_level": 0.0}, "ci_level"),
    ):
        with pytest.raises(InputError) as err:
            fleet_bias(res, **kwargs)
        assert err.value.argument == name
