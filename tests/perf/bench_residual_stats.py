"""Benchmark: time and peak memory of the residual statistics (run by hand, never collected).

    python tests/perf/bench_residual_stats.py [--series 10000] [--periods 156] [--repeat 7]

Invented data (seeded): independent N(0, 1) residuals, ``series x periods``. Two layouts:
``full`` (every series observed over all periods, the common case) and ``ragged`` (a fleet
where a quarter of the series start 1-30 periods late and one in ten has 1-5 interior gaps).
Each call runs on an already computed ``Residuals`` (as the gate calls it). Times are the best
of ``--repeat`` runs: wall clock and the process' CPU time (on a machine shared with other work
the CPU time is the steadier figure; with one BLAS thread the two agree on an idle machine).
The peak extra memory is traced by ``tracemalloc`` in one further run (the input matrix itself
not counted) and given as a multiple of the residual matrix.
"""

from __future__ import annotations

import argparse
import platform
import sys
import time
import tracemalloc
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from service.core.burn_in import burn_in_hint
from service.core.ewc import ewc_bias, ewc_long_run_variance
from service.core.fleet_bias import fleet_bias
from service.core.residual_arrays import as_residuals
from service.core.robust_portmanteau import robust_portmanteau


def make_data(layout: str, n_series: int, n_periods: int) -> np.ndarray:
    rng = np.random.default_rng(156)
    x = rng.normal(size=(n_series, n_periods))
    if layout == "ragged":
        late = rng.random(n_series) < 0.25
        start = np.where(late, rng.integers(1, 31, n_series), 0)
        x[np.arange(n_periods)[None, :] < start[:, None]] = np.nan
        gappy = np.flatnonzero(rng.random(n_series) < 0.1)
        for _ in range(5):
            cols = rng.integers(31, n_periods - 1, gappy.size)
            keep = rng.random(gappy.size) < 0.6
            x[gappy[keep], cols[keep]] = np.nan
    return x


SUMMED = ("ewc_bias", "robust_portmanteau (lags 1..10)", "fleet_bias", "burn_in_hint (m = 1)")


def calls(res, n_series: int):
    return {
        "ewc_bias": lambda: ewc_bias(res),
        "ewc_long_run_variance": lambda: ewc_long_run_variance(res),
        "robust_portmanteau (lags 1..10)": lambda: robust_portmanteau(res, lags=10),
        "robust_portmanteau (m = 52: lags 1..10, 52)": lambda: robust_portmanteau(
            res, season_length=52
        ),
        "robust_portmanteau (lags 1..30)": lambda: robust_portmanteau(res, lags=30),
        "fleet_bias": lambda: fleet_bias(res, np.ones(n_series)),
        "burn_in_hint (m = 1)": lambda: burn_in_hint(res),
        "burn_in_hint (m = 52)": lambda: burn_in_hint(res, season_length=52),
    }


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__)
    ap.add_argument("--series", type=int, default=10_000)
    ap.add_argument("--periods", type=int, default=156)
    ap.add_argument("--repeat", type=int, default=7)
    ap.add_argument("--layout", action="append", choices=("full", "ragged"))
    args = ap.parse_args()
    print(
        f"CPython {platform.python_version()}, numpy {np.__version__}; "
        f"{args.series:,} series x {args.periods} periods, best of {args.repeat}"
    )
    for layout in args.layout or ["full", "ragged"]:
        x = make_data(layout, args.series, args.periods)
        res = as_residuals(x)
        print(f"\n{layout}: input {x.nbytes / 2**20:.1f} MiB (the residual matrix)\n")
        print("| call | wall (ms) | CPU (ms) | peak extra memory | x input |")
        print("|---|---|---|---|---|")
        total = total_cpu = 0.0
        for name, fn in calls(res, args.series).items():
            fn()  # warm up
            best = cpu = np.inf
            for _ in range(args.repeat):
                t0, c0 = time.perf_counter(), time.process_time()
                fn()
                best = min(best, time.perf_counter() - t0)
                cpu = min(cpu, time.process_time() - c0)
            tracemalloc.start()
            fn()
            _, peak = tracemalloc.get_traced_memory()
            tracemalloc.stop()
            if name in SUMMED:
                total += best
                total_cpu += cpu
            print(
                f"| {name} | {1e3 * best:.1f} | {1e3 * cpu:.1f} | {peak / 2**20:.1f} MiB "
                f"| {peak / x.nbytes:.2f} |"
            )
        print(f"\n{' + '.join(SUMMED)}: {1e3 * total:.0f} ms wall, {1e3 * total_cpu:.0f} ms CPU")


if __name__ == "__main__":
    main()
