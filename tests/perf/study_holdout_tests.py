"""Size and power of the holdout tests on one-origin forecast paths (run by hand, not collected
by pytest).

Invented, simulated series: 104 training periods, then a holdout of H = 6, 12 or 24 steps
forecast from the last training period. Three correct models, each forecasting with its true
conditional mean (and, for coverage, its true predictive intervals):

* ``iid``: level 50 plus N(0, 1) noise, forecast 50;
* ``ar1``: AR(1) with phi 0.5 around 50, forecast ``50 + 0.5^h (y_T - 50)``;
* ``seasonal``: level 50 plus a fixed seasonal pattern (m = 12, amplitude 3) plus N(0, 1)
  noise, forecast the true seasonal mean;

and, for power, a clearly worse model: a random walk forecast by its training mean. The bias
and coverage studies add a fourth correct model, ``rw``: a random walk forecast by its last
value with its true intervals (sd ``sqrt(h)``), whose errors along the path are the most
correlated.

    python tests/perf/study_holdout_tests.py dm --series 4000
    python tests/perf/study_holdout_tests.py bias --series 4000
    python tests/perf/study_holdout_tests.py coverage --series 4000

Each rate is a proportion over ``series`` independent series; its standard error is
``sqrt(p (1 - p) / series)`` (0.16 points at 1% and 0.34 points at 5% for 4000 series).
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import numpy as np
from scipy import stats

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from service.core import interval_coverage, make_batch
from service.core.comparison import dm_test, ewc_terms, holm
from service.core.coverage_tests import fleet_coverage, miss_dependence
from service.core.fleet_pooling import pooled_mean
from service.core.holdout import benchmark_forecasts
from service.core.holdout_bias import fleet_holdout_bias, path_bias
from service.core.path_variance import ewc_degrees

TRAIN = 104
HORIZONS = (6, 12, 24)
PHI = 0.5
LEVEL = 50.0
M = 12
SEASON = 3.0 * np.sin(2 * np.pi * np.arange(M) / M)


def simulate(kind: str, n: int, horizon: int, rng: np.random.Generator):
    """``(y, forecasts, sd, m)``: paths of ``TRAIN + horizon`` values, the model's holdout
    forecasts, the true h-step error sd per step and the season length."""
    t = TRAIN + horizon
    z = rng.standard_normal((n, t))
    steps = np.arange(1, horizon + 1)
    if kind == "iid":
        y = LEVEL + z
        f = np.full((n, horizon), LEVEL)
        sd = np.ones(horizon)
        m = 1
    elif kind == "ar1":
        x = np.empty_like(z)
        x[:, 0] = z[:, 0] / np.sqrt(1 - PHI**2)
        for k in range(1, t):
            x[:, k] = PHI * x[:, k - 1] + z[:, k]
        y = LEVEL + x
        f = LEVEL + PHI ** steps[None, :] * x[:, TRAIN - 1 : TRAIN]
        sd = np.sqrt((1 - PHI ** (2 * steps)) / (1 - PHI**2))
        m = 1
    elif kind == "seasonal":
        season = SEASON[np.arange(t) % M]
        y = LEVEL + season[None, :] + z
        f = np.repeat((LEVEL + season[TRAIN:])[None, :], n, axis=0)
        sd = np.ones(horizon)
        m = M
    elif kind == "rw":
        y = LEVEL + np.cumsum(z, axis=1)
        f = np.repeat(y[:, TRAIN - 1 : TRAIN], horizon, axis=1)
        sd = np.sqrt(steps.astype(float))
        m = 1
    elif kind == "random_walk":
        y = LEVEL + np.cumsum(z, axis=1)
        f = np.repeat(y[:, :TRAIN].mean(axis=1, keepdims=True), horizon, axis=1)
        sd = np.sqrt(steps.astype(float))
        m = 1
    else:
        raise ValueError(kind)
    return y, f, sd, m


def one_step_fitted(kind: str, y: np.ndarray) -> np.ndarray:
    """True one-step conditional means over the training period (NaN at t = 1 for AR(1))."""
    train = y[:, :TRAIN]
    if kind == "iid":
        return np.full(train.shape, LEVEL)
    if kind == "ar1":
        out = np.full(train.shape, np.nan)
        out[:, 1:] = LEVEL + PHI * (train[:, :-1] - LEVEL)
        return out
    if kind == "seasonal":
        return np.repeat((LEVEL + SEASON[np.arange(TRAIN) % M])[None, :], y.shape[0], axis=0)
    out = np.full(train.shape, np.nan)
    out[:, 1:] = train[:, :-1]
    return out


def errors_and_benchmarks(kind: str, n: int, horizon: int, rng: np.random.Generator):
    y, f, sd, m = simulate(kind, n, horizon, rng)
    train, hold = y[:, :TRAIN], y[:, TRAIN:]
    batch = make_batch(train, train, season_length=m, holdout_actuals=hold, holdout_forecasts=f)
    bench = benchmark_forecasts(batch, horizon)
    return hold, f, sd, bench


# --- Diebold-Mariano: the dependence horizon and the variance ---------------------------------


def dm_rules(horizon: int) -> dict[str, dict]:
    cube = int(np.floor(horizon ** (1 / 3)))
    llss = int(ewc_degrees(horizon))
    default = int(ewc_terms(horizon))
    return {
        "HLN h=1": {"variance": "acf", "h": 1},
        "HLN h=2": {"variance": "acf", "h": 2},
        "HLN h=3": {"variance": "acf", "h": 3},
        f"HLN h=floor(H^1/3)={cube}": {"variance": "acf", "h": cube},
        f"EWC B=floor(0.4 H^2/3)={llss}": {"variance": "ewc", "b": llss},
        f"EWC B=max(2, floor(0.8 H^2/3))={default}": {"variance": "ewc", "b": default},
        f"EWC B=floor(H/2)={horizon // 2}": {"variance": "ewc", "b": horizon // 2},
    }


def p_worse(model_e, bench_e, rule, loss):
    return dm_test(model_e, bench_e, loss=loss, **rule)


def study_dm(n: int, seed: int, losses: list[str]) -> None:
    rng = np.random.default_rng(seed)
    print("## Diebold-Mariano: one-sided rejection of 'model worse'\n")
    print(
        f"{n} series per cell; correct models against every benchmark (Holm across them: the "
        "rate a series is flagged worse than some benchmark), and the worse model (training "
        "mean on a random walk) against naive (power).\n"
    )
    for loss in losses:
        print(f"### {loss} loss\n")
        print(
            "| H | rule | iid 1% | iid 5% | ar1 1% | ar1 5% | seasonal 1% | seasonal 5% "
            "| worst single benchmark 5% | power 1% | power 5% | fallback |"
        )
        print("|---|---|---|---|---|---|---|---|---|---|---|---|")
        for horizon in HORIZONS:
            data = {
                kind: errors_and_benchmarks(kind, n, horizon, rng)
                for kind in ("iid", "ar1", "seasonal", "random_walk")
            }
            for name, rule in dm_rules(horizon).items():
                cells = []
                worst_single = 0.0
                fallback = []
                for kind in ("iid", "ar1", "seasonal"):
                    hold, f, _, bench = data[kind]
                    model_e = hold - f
                    bench_e = np.stack([hold - b for b in bench.values()])
                    res = p_worse(model_e, bench_e, rule, loss)
                    p = res.p_worse
                    if rule["variance"] == "acf":
                        fallback.append(res.fallback.mean())
                    worst_single = max(worst_single, float((p <= 0.05).mean(axis=1).max()))
                    p_any = np.nanmin(holm(p, axis=0), axis=0)
                    cells += [(p_any <= 0.01).mean(), (p_any <= 0.05).mean()]
                hold, f, _, bench = data["random_walk"]
                p = p_worse(hold - f, hold - bench["naive"], rule, loss).p_worse
                cells += [(p <= 0.01).mean(), (p <= 0.05).mean()]
                fb = f"{100 * np.mean(fallback):.1f}%" if fallback else "-"
                row = " | ".join(f"{100 * c:.1f}" for c in cells[:6])
                print(
                    f"| {horizon} | {name} | {row} | {100 * worst_single:.1f} | "
                    f"{100 * cells[6]:.1f} | {100 * cells[7]:.1f} | {fb} |"
                )
        print()


# --- Holdout bias ----------------------------------------------------------------------------

BIAS_KINDS = ("iid", "ar1", "seasonal", "rw")


def bias_rules(horizon: int) -> dict[str, dict]:
    llss = int(ewc_degrees(horizon))
    return {
        "NW L=0, t(n-1)": {"method": "newey_west", "lags": 0},
        "NW L=1, t(n-1)": {"method": "newey_west", "lags": 1},
        "NW L=2, t(n-1)": {"method": "newey_west", "lags": 2},
        f"EWC B={llss}, t(B)": {"method": "ewc", "b": llss},
        f"EWC B={int(ewc_terms(horizon))}, t(B)": {"method": "ewc", "b": int(ewc_terms(horizon))},
        "intervals (mean sd), z": {"method": "intervals"},
        "intervals (independent), z": {"method": "independent"},
    }


def bias_p(errors: np.ndarray, sd: np.ndarray, rule: dict) -> np.ndarray:
    """Two-sided p-values; the interval variants are computed here from the true h-step sd
    (what correct normal intervals imply): SE = mean sd (fully correlated errors, an upper
    bound) or sqrt(sum sd^2) / H (independent errors)."""
    if rule["method"] in ("intervals", "independent"):
        h = errors.shape[1]
        se = sd.mean() if rule["method"] == "intervals" else np.sqrt((sd**2).sum()) / h
        return 2 * stats.norm.sf(np.abs(errors.mean(axis=1)) / se)
    return path_bias(errors, **rule).p_value


def study_bias(n: int, seed: int, fleet: int, reps: int) -> None:
    rng = np.random.default_rng(seed)
    print("## Holdout bias per series: two-sided rejection of 'mean error 0'\n")
    print(
        f"{n} series per cell. Size: correct forecasts. Power: forecasts shifted by 0.5 and 1 "
        "innovation sd (rejections at 5%). 'intervals' uses the true h-step error sd, as "
        "correct intervals would report it.\n"
    )
    header = " | ".join(f"{k} 1% | {k} 5% | {k} +0.5 | {k} +1" for k in BIAS_KINDS)
    print(f"| H | variance | {header} |")
    print("|---|---|" + "---|" * (4 * len(BIAS_KINDS)))
    for horizon in HORIZONS:
        data = {}
        for kind in BIAS_KINDS:
            y, f, sd, _ = simulate(kind, n, horizon, rng)
            data[kind] = (y[:, TRAIN:] - f, sd)
        for name, rule in bias_rules(horizon).items():
            cells = []
            for kind in BIAS_KINDS:
                e, sd = data[kind]
                p0 = bias_p(e, sd, rule)
                p5 = bias_p(e - 0.5, sd, rule)
                p1 = bias_p(e - 1.0, sd, rule)
                cells += [(p0 <= 0.01).mean(), (p0 <= 0.05).mean(), (p5 <= 0.05).mean()]
                cells += [(p1 <= 0.05).mean()]
            print(f"| {horizon} | {name} | " + " | ".join(f"{100 * c:.1f}" for c in cells) + " |")
    print()
    print(f"## Fleet-pooled holdout bias: fleets of {fleet} series, {reps} fleets per cell\n")
    print(
        "Weighted mean of ebar_i / s_i (s_i: training residual RMS), HC1 variance across "
        "series, t(G-1). Power: every forecast shifted by 0.1 and 0.2 innovation sd "
        "(rejections at 5%).\n"
    )
    print(f"| H | {header.replace('+0.5', '+0.1').replace('+1', '+0.2')} |")
    print("|---|" + "---|" * (4 * len(BIAS_KINDS)))
    for horizon in HORIZONS:
        cells = []
        for kind in BIAS_KINDS:
            y, f, _, m = simulate(kind, fleet * reps, horizon, rng)
            fitted = one_step_fitted(kind, y)
            out = []
            for shift in (0.0, 0.1, 0.2):
                batch = make_batch(
                    y[:, :TRAIN],
                    fitted,
                    season_length=m,
                    holdout_actuals=y[:, TRAIN:],
                    holdout_forecasts=f + shift,
                )
                u = fleet_holdout_bias(batch).standardised.reshape(reps, fleet)
                p = np.array([pooled_mean(row, np.full(fleet, horizon)).p_value for row in u])
                out.append(p)
            cells += [(out[0] <= 0.01).mean(), (out[0] <= 0.05).mean()]
            cells += [(out[1] <= 0.05).mean(), (out[2] <= 0.05).mean()]
        print(f"| {horizon} | " + " | ".join(f"{100 * c:.1f}" for c in cells) + " |")
    print()


# --- Coverage ---------------------------------------------------------------------------------

COVERAGE_LEVEL = 0.9


def interval_batch(kind: str, n: int, horizon: int, rng: np.random.Generator, widen: float = 1.0):
    y, f, sd, m = simulate(kind, n, horizon, rng)
    q = stats.norm.ppf(0.5 + COVERAGE_LEVEL / 2) * sd[None, :] * widen
    return make_batch(
        y[:, :TRAIN],
        y[:, :TRAIN],
        season_length=m,
        holdout_actuals=y[:, TRAIN:],
        holdout_forecasts=f,
        holdout_lower=f - q,
        holdout_upper=f + q,
        level=COVERAGE_LEVEL,
    )


def study_coverage(n: int, seed: int, fleet: int, reps: int) -> None:
    rng = np.random.default_rng(seed)
    print(f"## Coverage: true {COVERAGE_LEVEL:.0%} predictive intervals of the correct models\n")
    print(
        f"{n} series per cell. Rejection rates at 5% of Kupiec's POF, Christoffersen's "
        "independence and conditional-coverage tests (among the series where they are "
        "defined; 'skipped' is the share where independence is not).\n"
    )
    print("| H | model | POF 5% | independence 5% | cond. coverage 5% | skipped |")
    print("|---|---|---|---|---|---|")
    for horizon in HORIZONS:
        for kind in ("iid", "ar1", "seasonal", "rw"):
            batch = interval_batch(kind, n, horizon, rng)
            pof = interval_coverage(batch).p_value
            dep = miss_dependence(batch)
            ran = ~np.isnan(dep.p_ind)
            print(
                f"| {horizon} | {kind} | {100 * (pof <= 0.05).mean():.1f} | "
                f"{100 * (dep.p_ind[ran] <= 0.05).mean():.1f} | "
                f"{100 * (dep.p_cc[ran] <= 0.05).mean():.1f} | {100 * (~ran).mean():.1f}% |"
            )
    print()
    print(
        f"## Fleet-pooled coverage: fleets of {fleet} series, {reps} fleets per cell, "
        f"level {COVERAGE_LEVEL}\n"
    )
    print(
        "Rejection at 1% / 5% of 'the fleet misses at 1 - level': the cluster-robust test "
        "(fleet_coverage), and for contrast the binomial test that takes every step as "
        "independent. Power: intervals 20% narrower than the truth (rejections at 5%).\n"
    )
    print(
        "| H | model | cluster 1% | cluster 5% | binomial 1% | binomial 5% | "
        "cluster, 20% narrower | binomial, 20% narrower |"
    )
    print("|---|---|---|---|---|---|---|---|")
    for horizon in HORIZONS:
        for kind in ("iid", "ar1", "seasonal", "rw"):
            rates = []
            for widen in (1.0, 0.8):
                batch = interval_batch(kind, fleet * reps, horizon, rng, widen)
                pc, pb = [], []
                for r in range(reps):
                    part = batch.take(np.arange(r * fleet, (r + 1) * fleet))
                    res = fleet_coverage(part)
                    pc.append(res.p_value)
                    x = res.miss_rate * res.n_steps
                    z = (x - res.n_steps * res.nominal) / np.sqrt(
                        res.n_steps * res.nominal * (1 - res.nominal)
                    )
                    pb.append(2 * stats.norm.sf(abs(z)))
                rates.append((np.array(pc), np.array(pb)))
            (pc, pb), (pcw, pbw) = rates
            print(
                f"| {horizon} | {kind} | {100 * (pc <= 0.01).mean():.1f} | "
                f"{100 * (pc <= 0.05).mean():.1f} | {100 * (pb <= 0.01).mean():.1f} | "
                f"{100 * (pb <= 0.05).mean():.1f} | {100 * (pcw <= 0.05).mean():.1f} | "
                f"{100 * (pbw <= 0.05).mean():.1f} |"
            )
    print()


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("study", choices=["dm", "bias", "coverage", "all"])
    parser.add_argument("--series", type=int, default=4000)
    parser.add_argument("--seed", type=int, default=20240611)
    parser.add_argument("--fleet", type=int, default=50, help="series per fleet (pooled tests)")
    parser.add_argument("--reps", type=int, default=2000, help="fleets per cell (pooled tests)")
    args = parser.parse_args()
    start = time.perf_counter()
    if args.study in ("dm", "all"):
        study_dm(args.series, args.seed, ["squared", "absolute"])
    if args.study in ("bias", "all"):
        study_bias(args.series, args.seed + 1, args.fleet, args.reps)
    if args.study in ("coverage", "all"):
        study_coverage(args.series, args.seed + 2, args.fleet, args.reps)
    print(f"_{time.perf_counter() - start:.0f} s_")


if __name__ == "__main__":
    main()
