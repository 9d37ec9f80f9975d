"""Simulation study of the gate under the default policy (run by hand, not collected by pytest).

Fleets of 200 series with invented, simulated residuals: sound (white noise) and flawed (a bias
of 0.3 or 0.5 residual standard deviations, AR(1) residuals with phi 0.3 or 0.5, ARCH(1)
residuals). For each scenario and length T it reports how often the fleet verdict is ``fail`` and
how often it is ``warn`` or worse.

    python tests/perf/gate_study.py --reps 1000

Each figure is a proportion over ``reps`` independent fleets; its standard error is at most
``0.5 / sqrt(reps)`` (1.6 points at 1000 reps, 0.3 points for rates near 1% or 99%).
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from service.core import assess, default_policy, make_batch

SCENARIOS: tuple[tuple[str, str, float], ...] = (
    ("sound", "white", 0.0),
    ("bias 0.3 sd", "bias", 0.3),
    ("bias 0.5 sd", "bias", 0.5),
    ("AR(1) phi 0.3", "ar1", 0.3),
    ("AR(1) phi 0.5", "ar1", 0.5),
    ("ARCH(1) alpha 0.5", "arch1", 0.5),
)
LENGTHS = (52, 104, 156)
N_SERIES = 200


def residuals(kind: str, param: float, n: int, t: int, rng: np.random.Generator) -> np.ndarray:
    """Simulated residuals, shape ``(n, t)``, unit innovation variance."""
    z = rng.standard_normal((n, t + 50))
    if kind == "white":
        e = z
    elif kind == "bias":
        e = z + param
    elif kind == "ar1":
        e = np.empty_like(z)
        e[:, 0] = z[:, 0] / np.sqrt(1 - param**2)
        for k in range(1, z.shape[1]):
            e[:, k] = param * e[:, k - 1] + z[:, k]
    elif kind == "arch1":
        # sigma_t^2 = (1 - alpha) + alpha e_{t-1}^2: unconditional variance 1.
        e = np.empty_like(z)
        e[:, 0] = z[:, 0]
        for k in range(1, z.shape[1]):
            e[:, k] = np.sqrt((1 - param) + param * e[:, k - 1] ** 2) * z[:, k]
    else:
        raise ValueError(kind)
    return e[:, 50:]


def fleet(kind: str, param: float, t: int, rng: np.random.Generator, n: int = N_SERIES):
    """A batch of ``n`` invented series: level around 100 per series, given residuals."""
    level = rng.uniform(50, 150, size=(n, 1))
    actuals = level + 5.0 * rng.standard_normal((n, t))
    e = residuals(kind, param, n, t, rng)
    return make_batch(actuals, actuals - e, ids=[f"series-{i}" for i in range(n)])


def rates(kind: str, param: float, t: int, reps: int, seed: int) -> tuple[float, float]:
    """(fail rate, warn-or-worse rate) of the fleet verdict over ``reps`` fleets."""
    rng = np.random.default_rng(seed)
    policy = default_policy()
    fails = warns = 0
    for _ in range(reps):
        verdict = assess(fleet(kind, param, t, rng), policy).verdict.value
        fails += verdict == "fail"
        warns += verdict in ("fail", "warn")
    return fails / reps, warns / reps


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--reps", type=int, default=1000)
    parser.add_argument("--seed", type=int, default=20261201)
    args = parser.parse_args()
    start = time.perf_counter()
    print(f"{N_SERIES} series per fleet, {args.reps} fleets per cell, default policy")
    print("| scenario | T | fleet fails | fleet warns or fails |")
    print("|---|---|---|---|")
    for s, (label, kind, param) in enumerate(SCENARIOS):
        for t in LENGTHS:
            fail, warn = rates(kind, param, t, args.reps, args.seed + 1000 * s + t)
            print(f"| {label} | {t} | {fail:.1%} | {warn:.1%} |", flush=True)
    print(f"elapsed {time.perf_counter() - start:.0f} s")


if __name__ == "__main__":
    main()
