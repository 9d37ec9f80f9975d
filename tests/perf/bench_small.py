"""Benchmark: the fixed per-call cost of the core on tiny batches.

Run by hand (never collected by pytest)::

    python tests/perf/bench_small.py [--repeats 2000] [--periods 156]

Times ``make_batch(...)`` + ``assess(batch, default_policy()).to_dict()`` on

(a) one invented series of ``--periods`` weekly observations whose fitted value misses the first
    week, no holdout (the REST service's single-series case; target: median <= 0.7 ms);
(b) the same series with a 12-step holdout and 90% prediction intervals;
(c) a batch of 10 such series with holdouts and intervals.

Prints, per case, the minimum and median time per call over ``--repeats`` calls (the machine
is shared: the minimum is the call least disturbed by other work) and the number of Python
function calls one call makes (cProfile). The median thread CPU time is printed beside the
wall-clock figures: on a loaded machine it leaves out the time the process waited for a core.
"""

from __future__ import annotations

import argparse
import cProfile
import platform
import pstats
import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from service.core import assess, default_policy, make_batch


def invented_series(n_series: int, periods: int, horizon: int, seed: int = 20261202):
    """Invented weekly demand-like series, fitted values and a holdout (seeded)."""
    rng = np.random.default_rng(seed)
    level = rng.uniform(50, 500, (n_series, 1))
    t = np.arange(periods + horizon)
    season = 0.2 * np.sin(2 * np.pi * t / 52)[None, :]
    e = rng.standard_normal((n_series, periods + horizon))
    e[:, 1:] += 0.3 * e[:, :-1]
    y = level * (1 + season) + 0.05 * level * e
    fitted = y[:, :periods] - 0.05 * level * e[:, :periods]
    fitted[:, 0] = np.nan
    actuals = y[:, :periods]
    hold_y = y[:, periods:]
    hold_f = (level * (1 + season))[:, periods:]
    half = 1.645 * 0.05 * level * np.ones((1, horizon))
    return actuals, fitted, hold_y, hold_f, hold_f - half, hold_f + half


def one_call(case):
    actuals, fitted, kwargs, policy = case
    batch = make_batch(actuals, fitted, **kwargs)
    return assess(batch, policy).to_dict()


def measure(case, repeats: int) -> tuple[float, float, float, int]:
    for _ in range(50):  # warm caches and lazy imports
        one_call(case)
    times = np.empty(repeats)
    cpu = np.empty(repeats)
    for i in range(repeats):
        c0 = time.thread_time()
        t0 = time.perf_counter()
        one_call(case)
        times[i] = time.perf_counter() - t0
        cpu[i] = time.thread_time() - c0
    prof = cProfile.Profile()
    prof.enable()
    one_call(case)
    prof.disable()
    calls = pstats.Stats(prof).total_calls  # type: ignore[attr-defined]
    return float(times.min()), float(np.median(times)), float(np.median(cpu)), int(calls)


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--repeats", type=int, default=2000)
    parser.add_argument("--periods", type=int, default=156)
    parser.add_argument("--horizon", type=int, default=12)
    parser.add_argument(
        "--profile", action="store_true", help="print the top functions of case (a) by own time"
    )
    args = parser.parse_args(argv)

    policy = default_policy()
    ya, fa, hy, hf, lo, up = invented_series(10, args.periods, args.horizon)
    cases = {
        "(a) 1 series, no holdout": (ya[:1], fa[:1], {}, policy),
        "(b) 1 series, holdout + 90% intervals": (
            ya[:1],
            fa[:1],
            {
                "holdout_actuals": hy[:1],
                "holdout_forecasts": hf[:1],
                "holdout_lower": lo[:1],
                "holdout_upper": up[:1],
                "level": 0.9,
            },
            policy,
        ),
        "(c) 10 series, holdout + 90% intervals": (
            ya,
            fa,
            {
                "holdout_actuals": hy,
                "holdout_forecasts": hf,
                "holdout_lower": lo,
                "holdout_upper": up,
                "level": 0.9,
            },
            policy,
        ),
    }
    print(
        f"machine: {platform.machine()}, {platform.python_implementation()} "
        f"{platform.python_version()}, numpy {np.__version__}"
    )
    print(
        f"make_batch + assess(default_policy()) + to_dict, {args.periods} periods, "
        f"{args.repeats} calls per case"
    )
    first_median = None
    for label, case in cases.items():
        best, median, cpu, calls = measure(case, args.repeats)
        first_median = median if first_median is None else first_median
        print(
            f"{label}: min {best * 1e3:.3f} ms, median {median * 1e3:.3f} ms "
            f"(median thread CPU time {cpu * 1e3:.3f} ms), {calls} function calls"
        )
    print(f"target (a) median <= 0.7 ms: {'met' if first_median <= 0.7e-3 else 'NOT met'}")
    if args.profile:
        prof = cProfile.Profile()
        prof.enable()
        for _ in range(200):
            one_call(cases["(a) 1 series, no holdout"])
        prof.disable()
        pstats.Stats(prof).sort_stats("tottime").print_stats(25)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
