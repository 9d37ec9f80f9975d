"""Size and power of the residual statistics by simulation (run by hand, not collected by pytest).

    python tests/perf/study_residual_tests.py [--part NAME ...] [--reps 5000]

Parts: ``portmanteau`` (robust portmanteau vs Ljung-Box), ``lag1`` (the lag-1 regression test,
the portmanteau on lags 2..L and the autocorrelation check), ``tracking`` (the tracking signal
with and without its volatile-window rule), ``ewc`` (EWC bias vs Newey-West),
``exact`` (the EWC statistic against t_B under iid normal errors), ``fleet`` (Driscoll-Kraay vs
independent series) and ``burnin`` (false-hint rates); peak memory and time are measured by
``tests/perf/bench_residual_stats.py``. Every cell uses its own fixed seed; the
numbers are printed as Markdown tables for tests/perf/RESULTS_residual_tests.md.
All data are invented (simulated).
"""

from __future__ import annotations

import argparse
import time

import numpy as np
from scipy import stats

from service.core.burn_in import burn_in_hint
from service.core.checks.autocorrelation import (
    autocorrelation_lags,
    autocorrelation_test,
    ljung_box,
)
from service.core.checks.bias import bias, tracking_signal
from service.core.ewc import ewc_bias
from service.core.fleet_bias import fleet_bias
from service.core.lag_one_regression import lag_one_regression
from service.core.residual_arrays import as_residuals
from service.core.robust_portmanteau import robust_portmanteau

BURN = 200


def garch(rng, n, t, omega, alpha, beta, innov=None):
    """GARCH(1,1) paths, one per row: e_t = sigma_t z_t, sigma_t^2 = omega + alpha e_{t-1}^2
    + beta sigma_{t-1}^2, started at the unconditional variance, first BURN periods dropped."""
    z = rng.normal(size=(n, t + BURN)) if innov is None else innov
    out = np.empty((n, t + BURN))
    s2 = np.full(n, omega / (1 - alpha - beta))
    prev = np.zeros(n)
    for k in range(t + BURN):
        s2 = omega + alpha * prev * prev + beta * s2
        prev = np.sqrt(s2) * z[:, k]
        out[:, k] = prev
    return out[:, BURN:]


def ar1(rng, n, t, phi, innov=None):
    u = rng.normal(size=(n, t + BURN)) if innov is None else innov
    x = np.empty_like(u)
    x[:, 0] = u[:, 0] / np.sqrt(1 - phi * phi)
    for k in range(1, t + BURN):
        x[:, k] = phi * x[:, k - 1] + u[:, k]
    return x[:, BURN:]


def null_data(name, rng, n, t):
    if name == "white noise":
        return rng.normal(size=(n, t))
    if name == "GARCH(.1,.1,.8)":
        return garch(rng, n, t, 0.1, 0.1, 0.8)
    if name == "GARCH(.1,.15,.8)":
        return garch(rng, n, t, 0.1, 0.15, 0.8)
    if name == "t(3)":
        return rng.standard_t(3, size=(n, t))
    if name == "lognormal":
        return np.exp(rng.normal(size=(n, t))) - np.exp(0.5)
    if name == "AR(1) 0.3":
        return ar1(rng, n, t, 0.3)
    raise ValueError(name)


def rate(p, alpha):
    return float(np.mean(p < alpha))


def cell_rng(*parts):
    # A fixed seed per cell, independent of the order the cells are run in.
    return np.random.default_rng(list(repr(parts).encode()))


def part_portmanteau(reps):
    print("\n### Robust portmanteau (L = 10) vs Ljung-Box: rejection rates under the null\n")
    print(
        "| noise | T | robust 1.96: 1% | 5% | robust 2.576: 1% | 5% | Ljung-Box: 1% | 5% "
        "| diagonal fallback (1.96) |"
    )
    print("|---|---|---|---|---|---|---|---|---|")
    for name in ("white noise", "GARCH(.1,.1,.8)", "GARCH(.1,.15,.8)", "t(3)"):
        for t in (52, 104, 260):
            x = null_data(name, cell_rng("pm", name, t), reps, t)
            res = as_residuals(x)
            r1 = robust_portmanteau(res, lags=10, threshold=1.96)
            r2 = robust_portmanteau(res, lags=10, threshold=2.576)
            lb = ljung_box(res, lags=10)
            print(
                f"| {name} | {t} | {rate(r1.p_value, 0.01):.3f} | {rate(r1.p_value, 0.05):.3f} "
                f"| {rate(r2.p_value, 0.01):.3f} | {rate(r2.p_value, 0.05):.3f} "
                f"| {rate(lb.p_value, 0.01):.3f} | {rate(lb.p_value, 0.05):.3f} "
                f"| {np.mean(r1.details['diagonal_fallback']):.4f} |"
            )
    print("\n### Power against AR(1), normal innovations (same data for each test)\n")
    print("| phi | T | robust 1.96: 1% | 5% | robust 2.576: 1% | 5% | Ljung-Box: 1% | 5% |")
    print("|---|---|---|---|---|---|---|---|")
    for phi in (0.3, 0.5):
        for t in (52, 104):
            x = ar1(cell_rng("pmpow", phi, t), reps, t, phi)
            res = as_residuals(x)
            r1 = robust_portmanteau(res, lags=10, threshold=1.96)
            r2 = robust_portmanteau(res, lags=10, threshold=2.576)
            lb = ljung_box(res, lags=10)
            print(
                f"| {phi} | {t} | {rate(r1.p_value, 0.01):.3f} | {rate(r1.p_value, 0.05):.3f} "
                f"| {rate(r2.p_value, 0.01):.3f} | {rate(r2.p_value, 0.05):.3f} "
                f"| {rate(lb.p_value, 0.01):.3f} | {rate(lb.p_value, 0.05):.3f} |"
            )


def part_ewc(reps):
    print("\n### Bias tests under the null: EWC (t_B) vs Newey-West (current `bias`)\n")
    print("| noise | T | B | EWC: 1% | 5% | Newey-West: 1% | 5% |")
    print("|---|---|---|---|---|---|---|")
    names = ("white noise", "AR(1) 0.3", "GARCH(.1,.1,.8)", "t(3)", "lognormal")
    for name in names:
        for t in (20, 30, 52, 104, 156):
            x = null_data(name, cell_rng("ewc", name, t), reps, t)
            res = as_residuals(x)
            e = ewc_bias(res)
            nw = bias(res, np.ones(reps))
            print(
                f"| {name} | {t} | {int(e.details['bins'][0])} "
                f"| {rate(e.p_value, 0.01):.3f} | {rate(e.p_value, 0.05):.3f} "
                f"| {rate(nw.p_value, 0.01):.3f} | {rate(nw.p_value, 0.05):.3f} |"
            )
    print("\n### Power: white noise N(0, 1) plus a bias of d standard deviations\n")
    print(
        "Size-adjusted: rejecting where |t| exceeds its 99% / 95% quantile in 20,000 white-noise "
        "series of the same length (no bias), so both tests reject 1% / 5% under the null.\n"
    )
    print(
        "| d | T | EWC: 1% | 5% | Newey-West: 1% | 5% "
        "| size-adjusted EWC: 1% | 5% | size-adjusted Newey-West: 1% | 5% |"
    )
    print("|---|---|---|---|---|---|---|---|---|---|")
    for d in (0.3, 0.5):
        for t in (52, 104):
            null = as_residuals(cell_rng("ewcnull", t).normal(size=(20_000, t)))
            crit_e = np.quantile(np.abs(ewc_bias(null).statistic), [0.99, 0.95])
            crit_n = np.quantile(np.abs(bias(null, np.ones(20_000)).statistic), [0.99, 0.95])
            x = cell_rng("ewcpow", d, t).normal(size=(reps, t)) + d
            res = as_residuals(x)
            e = ewc_bias(res)
            nw = bias(res, np.ones(reps))
            ae = [np.mean(np.abs(e.statistic) > c) for c in crit_e]
            an = [np.mean(np.abs(nw.statistic) > c) for c in crit_n]
            print(
                f"| {d} | {t} | {rate(e.p_value, 0.01):.3f} | {rate(e.p_value, 0.05):.3f} "
                f"| {rate(nw.p_value, 0.01):.3f} | {rate(nw.p_value, 0.05):.3f} "
                f"| {ae[0]:.3f} | {ae[1]:.3f} | {an[0]:.3f} | {an[1]:.3f} |"
            )


def part_exact(reps):
    print("\n### EWC statistic against t_B under iid N(0, 1) (fixed seeds)\n")
    print("| T | B | series | KS distance to t_B | KS p-value | rejections at 1% | 5% | 10% |")
    print("|---|---|---|---|---|---|---|---|")
    n = 4 * reps
    for t in (3, 8, 20, 52, 156):
        x = cell_rng("exact", t).normal(size=(n, t))
        e = ewc_bias(x)
        b = int(e.details["bins"][0])
        ks = stats.kstest(e.statistic, stats.t(b).cdf)
        print(
            f"| {t} | {b} | {n} | {ks.statistic:.4f} | {ks.pvalue:.3f} "
            f"| {rate(e.p_value, 0.01):.4f} | {rate(e.p_value, 0.05):.4f} "
            f"| {rate(e.p_value, 0.10):.4f} |"
        )


def part_fleet(reps, n_series=200, per_batch=100):
    print(
        "\n### Fleet bias: 200 series, e_it = sqrt(rho) c_t + sqrt(1 - rho) u_it, "
        "rejection rates under the null\n"
    )
    print("| rho | weights | T | B | Driscoll-Kraay: 1% | 5% | independent-series z: 1% | 5% |")
    print("|---|---|---|---|---|---|---|---|")
    for rho in (0.2, 0.0):
        for weights in ("equal", "lognormal"):
            for t in (52, 104):
                rng = cell_rng("fleet", rho, weights, t)
                p_dk, p_naive, b = [], [], 0
                for lo in range(0, reps, per_batch):
                    g = min(per_batch, reps - lo)
                    c = rng.normal(size=(g, 1, t))
                    u = rng.normal(size=(g, n_series, t))
                    e = (np.sqrt(rho) * c + np.sqrt(1 - rho) * u).reshape(g * n_series, t)
                    if weights == "equal":
                        w = np.ones(g * n_series)
                    else:
                        w = np.exp(rng.normal(size=g * n_series))
                    fleet = np.repeat(np.arange(g), n_series)
                    r = fleet_bias(e, w, fleet=fleet)
                    p_dk.append(r.p_value)
                    p_naive.append(r.naive_p_value)
                    b = int(r.bins[0])
                p_dk = np.concatenate(p_dk)
                p_naive = np.concatenate(p_naive)
                print(
                    f"| {rho} | {weights} | {t} | {b} | {rate(p_dk, 0.01):.3f} "
                    f"| {rate(p_dk, 0.05):.3f} | {rate(p_naive, 0.01):.3f} "
                    f"| {rate(p_naive, 0.05):.3f} |"
                )


def part_burnin(reps):
    print("\n### Burn-in hint: share of clean series given a hint (k >= 1)\n")
    thresholds = (4.0, 5.0, 6.0, 8.0, 10.0)
    print("| noise | T | m (head) | " + " | ".join(f"z > {h:g}" for h in thresholds) + " |")
    print("|---|---|---|" + "---|" * len(thresholds))
    for name in ("white noise", "t(3)", "GARCH(.1,.15,.8)"):
        for t, m in ((52, 1), (104, 1), (156, 1), (104, 12), (156, 52)):
            x = null_data(name, cell_rng("burn", name, t, m), reps, t)
            res = as_residuals(x)
            cells = []
            for h in thresholds:
                r = burn_in_hint(res, season_length=m, threshold=h)
                cells.append(f"{np.mean(r.statistic > 0):.4f}")
            head = int(r.details["head"][0])
            print(f"| {name} | {t} | {m} ({head}) | " + " | ".join(cells) + " |")
    print("\n### Burn-in hint: the first k residuals shifted by a robust z of a (threshold 8)\n")
    print(
        "The shift is a times the noise's robust scale 1.4826 MAD (1 for N(0, 1), "
        "1.4826 x 0.7649 = 1.134 for t(3)), with a random sign per series.\n"
    )
    print("| noise | T | planted k | a | found exactly | found 0 |")
    print("|---|---|---|---|---|---|")
    robust_sd = {"white noise": 1.0, "t(3)": 1.4826 * stats.t(3).ppf(0.75)}
    for name in ("white noise", "t(3)"):
        for k in (1, 3, 6):
            for a in (10.0, 20.0):
                x = null_data(name, cell_rng("burnpow", name, k, a), reps, 104)
                sign = np.sign(cell_rng("sign", name, k, a).normal(size=(reps, 1)))
                x[:, :k] += a * robust_sd[name] * sign
                r = burn_in_hint(x)
                print(
                    f"| {name} | 104 | {k} | {a:g} | {np.mean(r.statistic == k):.3f} "
                    f"| {np.mean(r.statistic == 0):.3f} |"
                )


LAG1_LEVELS = (0.01 / 3, 0.01 / 15, 0.01, 0.05)
"""One series' share of the fail family (0.01 / 3), the depth a fleet of five reaches in it
(0.01 / 15), and the nominal 1% and 5%."""


def _lag1_row(res):
    """p-values of the lag-1 regression alone, the portmanteau on lags 2..L alone (L the
    check's short-lag rule) and the whole autocorrelation check."""
    check = autocorrelation_test(res)
    short, _, _ = autocorrelation_lags(res.n_obs)
    short[:, 0] = False
    alone = robust_portmanteau(res, lags=short)
    return lag_one_regression(res).p_value, alone.p_value, check.p_value, check


def part_lag1(reps):
    print("\n### The lag-1 regression test, the portmanteau on lags 2..L and the check\n")
    print(
        "Rejection rates at 0.01/3, 0.01/15, 1% and 5% (the check uses the lag-1 regression from "
        "30 residuals; below that its figures are the portmanteau on lags 1..L).\n"
    )
    levels = " / ".join(f"{a:.4g}" for a in LAG1_LEVELS)
    print(f"| residuals | T | lag-1 regression ({levels}) | portmanteau 2..L | check |")
    print("|---|---|---|---|---|")
    names = ("white noise", "GARCH(.1,.1,.8)", "GARCH(.1,.15,.8)", "t(3)", "lognormal")
    for name in names:
        for t in (20, 30, 52, 104, 156, 260):
            res = as_residuals(null_data(name, cell_rng("lag1", name, t), reps, t))
            cells = [
                " / ".join(f"{rate(p, a):.2%}" for a in LAG1_LEVELS) for p in _lag1_row(res)[:3]
            ]
            print(f"| {name} | {t} | " + " | ".join(cells) + " |", flush=True)
    print("\n### Power at 0.01 / 3 and 5% (same data for each test)\n")
    print("| residuals | T | lag-1 regression | portmanteau 2..L | check | Ljung-Box (10 lags) |")
    print("|---|---|---|---|---|---|")
    alternatives = (
        ("AR(1) 0.3", 52),
        ("AR(1) 0.3", 104),
        ("AR(1) 0.5", 52),
        ("AR(1) 0.5", 104),
        ("MA at lag 2, 0.4", 104),
        ("MA at lag 3, 0.4", 104),
        ("MA at lag 3, 0.4", 52),
    )
    for name, t in alternatives:
        rng = cell_rng("lag1pow", name, t)
        if name.startswith("AR"):
            x = ar1(rng, reps, t, float(name.split()[-1]))
        else:
            lag = int(name.split()[3].rstrip(","))
            u = rng.normal(size=(reps, t + lag))
            x = u[:, lag:] + 0.4 * u[:, :-lag]
        res = as_residuals(x)
        p1, p2, pc, check = _lag1_row(res)
        pl = check.details["ljung_box_p_value"]
        cells = [f"{rate(p, 0.01 / 3):.1%} / {rate(p, 0.05):.1%}" for p in (p1, p2, pc, pl)]
        print(f"| {name} | {t} | " + " | ".join(cells) + " |", flush=True)


TRACKING_LEVELS = (0.005 / 3, 0.005 / 15, 0.01, 0.05)
"""One series' tracking-signal share of the fail family (0.005 / 3), the depth a fleet of five
reaches in it, and the nominal 1% and 5%."""


def _tracking_pair(res):
    """The tracking signal's p-values as the check gives them and as they were with the
    whole-sample reference for every window (recomputed from the same ``z``)."""
    r = tracking_signal(res)
    n = res.n_obs.astype(float)
    z = r.details["z"]
    with np.errstate(invalid="ignore"):
        t = z * np.sqrt((n - 1) / np.maximum(n - z * z, 0.0))
    return r.p_value, 2 * stats.t.sf(np.abs(t), n - 1), r.details["volatile_window"]


def part_tracking(reps):
    print("\n### Tracking signal (window 12): volatile windows on their own t test or not\n")
    levels = " / ".join(f"{a:.4g}" for a in TRACKING_LEVELS)
    print(f"| residuals | T | check ({levels}) | whole-sample reference | volatile windows |")
    print("|---|---|---|---|---|")
    for name in ("white noise", "GARCH(.1,.1,.8)", "GARCH(.1,.15,.8)", "t(3)"):
        for t in (52, 104, 260):
            res = as_residuals(null_data(name, cell_rng("ts", name, t), reps, t))
            now, before, volatile = _tracking_pair(res)
            cells = [
                " / ".join(f"{rate(p, a):.3%}" for a in TRACKING_LEVELS) for p in (now, before)
            ]
            print(f"| {name} | {t} | " + " | ".join(cells) + f" | {np.mean(volatile):.1%} |")
    print("\n### Power: +d sd in the last 12 of T periods (white noise), at 0.005 / 3 and 5%\n")
    print("| d | T | check | whole-sample reference |")
    print("|---|---|---|---|")
    for d in (0.5, 1.0):
        for t in (52, 104):
            x = cell_rng("tspow", d, t).normal(size=(reps, t))
            x[:, -12:] += d
            now, before, _ = _tracking_pair(as_residuals(x))
            cells = [f"{rate(p, 0.005 / 3):.1%} / {rate(p, 0.05):.1%}" for p in (now, before)]
            print(f"| {d} | {t} | " + " | ".join(cells) + " |", flush=True)


PARTS = ("portmanteau", "ewc", "exact", "fleet", "burnin", "lag1", "tracking")


def main():
    ap = argparse.ArgumentParser(description=__doc__)
    ap.add_argument("--part", action="append", choices=PARTS)
    ap.add_argument("--reps", type=int, default=5000)
    args = ap.parse_args()
    parts = args.part or list(PARTS)
    print(f"numpy {np.__version__}, {args.reps} series per cell")
    for part in parts:
        t0 = time.perf_counter()
        globals()[f"part_{part}"](args.reps)
        print(f"\n({part}: {time.perf_counter() - t0:.0f} s)")


if __name__ == "__main__":
    main()
