"""Simulation study of the gate under the default policy (run by hand, not collected by pytest).

Invented fleets with simulated residuals, sound and flawed, through ``service.core.assess``:

* size rows: sound models under the conditions practitioners meet (white noise, GARCH(1,1),
  heavy tails, skew, a common shock across series, missing values, a correct seasonal model,
  a tiny but significant aggregate bias, short series), for fleets of 1, 5 and 200 series:
  how often the fleet verdict is ``fail`` and how often ``warn`` or worse;
* detection rows: a bias, AR(1) residuals, an ignored seasonal AR term, a recent level shift in
  part of the fleet, ARCH effects: how often the fleet fails;
* holdout rows: correct models with their own path forecasts and 95% intervals (a level, an
  AR(1) 0.5, a seasonal m = 12 profile) over 6, 12 and 24 steps, and flawed ones (forecasts
  shifted by 1 sd, a random walk forecast by its training mean, 80% intervals claimed as 95%);
* the per-series tests' rejection rates at 1% and 5% (raw p-values) under sound residuals;
* baseline rows: a new version against the version in production on the same 12-step holdout
  (fleets of 500), of equal quality (independent errors of the same size) and with errors of
  5% and 10% larger standard deviation.

    python tests/perf/gate_study.py --reps 1000 --small-reps 5000
    python tests/perf/gate_study.py --only size --reps 200     # a quicker look
    python tests/perf/gate_study.py --only baseline --reps 1000
    python tests/perf/gate_study.py --cell "sound: GARCH(1,1) 0.1/0.1/0.8,260,1" --seeds 8
        # one cell of the size or detection tables again, at its seed and the next 7

Each figure is a proportion over independent fleets; its standard error is at most
``0.5 / sqrt(reps)`` (1.6 points at 1,000 fleets, 0.3 near 1% or 99%; 0.14 near 1% at 5,000).
"""

from __future__ import annotations

import argparse
import sys
import time
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from service.core import default_policy, make_batch, run_checks
from service.core.gate import assess_many

BURN = 60  # periods simulated and dropped before each series, so processes start stationary


# ------------------------------------------------------------------------------- residuals


def white(n: int, t: int, rng: np.random.Generator, **_: float) -> np.ndarray:
    return rng.standard_normal((n, t))


def shifted(n: int, t: int, rng: np.random.Generator, *, shift: float, **_: float) -> np.ndarray:
    return rng.standard_normal((n, t)) + shift


def ar1(n: int, t: int, rng: np.random.Generator, *, phi: float, **_: float) -> np.ndarray:
    z = rng.standard_normal((n, t + BURN))
    e = np.empty_like(z)
    e[:, 0] = z[:, 0] / np.sqrt(1 - phi**2)
    for k in range(1, z.shape[1]):
        e[:, k] = phi * e[:, k - 1] + z[:, k]
    return e[:, BURN:]


def seasonal_ar(
    n: int, t: int, rng: np.random.Generator, *, phi: float, lag: float, **_: float
) -> np.ndarray:
    """``e_t = phi e_{t-m} + z_t``: a seasonal AR term the model left out."""
    m = int(lag)
    burn = max(BURN, 4 * m)
    z = rng.standard_normal((n, t + burn))
    e = z.copy()
    for k in range(m, z.shape[1]):
        e[:, k] = phi * e[:, k - m] + z[:, k]
    return e[:, burn:] * np.sqrt(1 - phi**2)


def garch(
    n: int,
    t: int,
    rng: np.random.Generator,
    *,
    omega: float,
    alpha: float,
    beta: float,
    **_: float,
) -> np.ndarray:
    """GARCH(1,1) with normal innovations, scaled to unit unconditional variance
    (``alpha + beta < 1``; finite fourth moment when ``3 alpha^2 + 2 alpha beta + beta^2 < 1``)."""
    z = rng.standard_normal((n, t + BURN))
    e = np.empty_like(z)
    var = np.full(n, omega / (1 - alpha - beta))
    for k in range(z.shape[1]):
        e[:, k] = np.sqrt(var) * z[:, k]
        var = omega + alpha * e[:, k] ** 2 + beta * var
    return e[:, BURN:] / np.sqrt(omega / (1 - alpha - beta))


def arch1(n: int, t: int, rng: np.random.Generator, *, alpha: float, **_: float) -> np.ndarray:
    return garch(n, t, rng, omega=1 - alpha, alpha=alpha, beta=0.0)


def student3(n: int, t: int, rng: np.random.Generator, **_: float) -> np.ndarray:
    return rng.standard_t(3, (n, t)) / np.sqrt(3.0)


def lognormal(n: int, t: int, rng: np.random.Generator, **_: float) -> np.ndarray:
    """Centred lognormal (sigma 0.5), unit variance: right-skewed errors with mean zero."""
    s = 0.5
    x = rng.lognormal(0.0, s, (n, t))
    mean, var = np.exp(s * s / 2), (np.exp(s * s) - 1) * np.exp(s * s)
    return (x - mean) / np.sqrt(var)


def common_shock(n: int, t: int, rng: np.random.Generator, *, rho: float, **_: float) -> np.ndarray:
    """Cross-series correlation ``rho`` from a shock every series shares each period."""
    shared = rng.standard_normal((1, t))
    return np.sqrt(rho) * shared + np.sqrt(1 - rho) * rng.standard_normal((n, t))


def recent_shift(
    n: int,
    t: int,
    rng: np.random.Generator,
    *,
    shift: float,
    share: float,
    window: float,
    **_: float,
) -> np.ndarray:
    """A level shift of ``shift`` sd in the last ``window`` periods of a ``share`` of series."""
    e = rng.standard_normal((n, t))
    hit = rng.random(n) < share if n > 5 else np.ones(n, dtype=bool)
    e[hit, t - int(window) :] += shift
    return e


GENERATORS: dict[str, Callable[..., np.ndarray]] = {
    "white": white,
    "bias": shifted,
    "ar1": ar1,
    "sar": seasonal_ar,
    "garch": garch,
    "arch1": arch1,
    "t3": student3,
    "lognormal": lognormal,
    "shock": common_shock,
    "recent": recent_shift,
}


# ------------------------------------------------------------------------------- scenarios


@dataclass(frozen=True)
class Scenario:
    label: str
    kind: str
    lengths: tuple[int, ...]
    params: dict[str, float] = field(default_factory=dict)
    season_length: int = 1
    missing: float = 0.0
    level_sd: float = 0.0
    sizes: tuple[int, ...] = (1, 5, 200)
    target: str = ""
    """What the default policy should give (the README's target)."""


SIZE = (
    Scenario("sound: white noise", "white", (20, 52, 104, 156), target="fail <= 1%"),
    Scenario(
        "sound: GARCH(1,1) 0.1/0.1/0.8",
        "garch",
        (104, 156, 260),
        {"omega": 0.1, "alpha": 0.1, "beta": 0.8},
        target="fail <= 1%; warns via arch_lm only",
    ),
    Scenario(
        "sound: GARCH(1,1) 0.05/0.15/0.8",
        "garch",
        (104, 260),
        {"omega": 0.05, "alpha": 0.15, "beta": 0.8},
        target="fail <= 1%; warns via arch_lm only",
    ),
    Scenario("sound: t(3) errors", "t3", (52, 104), target="fail <= 1%; warns via normality"),
    Scenario("sound: centred lognormal", "lognormal", (52, 104), target="fail <= 1%"),
    Scenario(
        "sound: common shock, corr 0.2",
        "shock",
        (52, 104),
        {"rho": 0.2},
        target="fail <= 1%",
    ),
    Scenario("sound: 10% missing at random", "white", (104,), missing=0.1, target="fail <= 1%"),
    Scenario(
        "sound: seasonal model, m = 12",
        "white",
        (52, 104),
        season_length=12,
        target="fail <= 1%",
    ),
    Scenario(
        "sound: seasonal model, m = 52",
        "white",
        (156,),
        season_length=52,
        target="fail <= 1%",
    ),
    Scenario(
        "tiny bias: 0.03% of the level (noise 5% of it), 10,000 series",
        "bias",
        (104,),
        {"shift": 0.006},
        level_sd=0.05,
        sizes=(10000,),
        target="no warn: significant but immaterial",
    ),
)

DETECT = (
    Scenario("bias 0.3 sd", "bias", (52, 104), {"shift": 0.3}, sizes=(200,)),
    Scenario(
        "bias 0.5 sd",
        "bias",
        (52, 104, 156),
        {"shift": 0.5},
        sizes=(1, 200),
        target="fail >= 95% at T = 104",
    ),
    Scenario("AR(1) phi 0.3", "ar1", (52, 104), {"phi": 0.3}, sizes=(200,)),
    Scenario(
        "AR(1) phi 0.5",
        "ar1",
        (52, 104, 156),
        {"phi": 0.5},
        sizes=(1, 200),
        target="fail >= 95% at T = 104",
    ),
    Scenario(
        "m = 12 ignored: seasonal AR 0.5 at lag 12",
        "sar",
        (52,),
        {"phi": 0.5, "lag": 12},
        season_length=12,
        sizes=(200,),
        target="fail >= 90%",
    ),
    Scenario(
        "m = 52 ignored: seasonal AR 0.5 at lag 52",
        "sar",
        (156,),
        {"phi": 0.5, "lag": 52},
        season_length=52,
        sizes=(200,),
        target="fail >= 90%",
    ),
    Scenario(
        "recent +1 sd shift, last 12 periods, 20% of series",
        "recent",
        (104,),
        {"shift": 1.0, "share": 0.2, "window": 12},
        sizes=(200,),
        target="fail >= 90%",
    ),
    Scenario(
        "ARCH(1) alpha 0.5",
        "arch1",
        (104,),
        {"alpha": 0.5},
        sizes=(200,),
        target="warn, never fail",
    ),
)


@dataclass(frozen=True)
class HoldoutScenario:
    label: str
    process: str
    """``level``: constant level plus noise; ``ar1``: AR(1) 0.5 around the level;
    ``seasonal``: a fixed m = 12 profile plus noise; ``walk``: a random walk."""
    horizons: tuple[int, ...] = (6, 12, 24)
    model: str = "true"
    """``true``: the process's own forecasts and 95% intervals; ``shifted``: those shifted by
    1 sd; ``mean``: the training mean with +-1.96 sd; ``narrow``: true 80% intervals
    labelled 95%."""
    target: str = ""


HOLDOUT = (
    HoldoutScenario("correct: level + noise", "level", target="fail <= 1%, warn <= 5%"),
    HoldoutScenario("correct: AR(1) 0.5", "ar1", target="fail <= 1%, warn <= 5%"),
    HoldoutScenario("correct: seasonal m = 12", "seasonal", target="fail <= 1%, warn <= 5%"),
    HoldoutScenario(
        "forecasts shifted by 1 sd", "level", (12,), "shifted", "fail >= 95%, holdout bias"
    ),
    HoldoutScenario("random walk, training mean forecast", "walk", (12,), "mean", "fail >= 95%"),
    HoldoutScenario("80% intervals claimed as 95%", "level", (12,), "narrow", "fail >= 95%"),
)

TRAIN = 104
Z95, Z80 = 1.959963984540054, 1.2815515655446004  # normal quantiles (scipy.stats.norm.ppf)


def holdout_fleet(s: HoldoutScenario, n: int, h: int, rng: np.random.Generator):
    """A batch of ``n`` invented series with a ``TRAIN``-period fit and an ``h``-step holdout
    from one origin: one-step fitted values and path forecasts from the process itself."""
    t = TRAIN + h
    level = rng.uniform(50, 150, size=(n, 1))
    sd = 5.0
    z = sd * rng.standard_normal((n, t))
    steps = np.arange(1, h + 1)[None, :]
    m = 12
    if s.process in ("level", "seasonal"):
        profile = (
            10.0 * np.sin(2 * np.pi * np.arange(t) / m)[None, :] if s.process == "seasonal" else 0.0
        )
        mean = level + profile
        y = mean + z
        fitted = mean[:, :TRAIN] if s.process == "seasonal" else np.repeat(level, TRAIN, axis=1)
        path = mean[:, TRAIN:] if s.process == "seasonal" else np.repeat(level, h, axis=1)
        half = np.full((n, h), Z95 * sd)
    elif s.process == "ar1":
        phi = 0.5
        d = np.empty((n, t))
        d[:, 0] = z[:, 0] / np.sqrt(1 - phi**2)
        for k in range(1, t):
            d[:, k] = phi * d[:, k - 1] + z[:, k]
        y = level + d
        fitted = np.concatenate([np.full((n, 1), np.nan), level + phi * d[:, : TRAIN - 1]], axis=1)
        path = level + d[:, TRAIN - 1 : TRAIN] * phi**steps
        half = Z95 * sd * np.sqrt((1 - phi ** (2 * steps)) / (1 - phi**2))
    else:  # walk
        y = level + np.cumsum(z, axis=1)
        fitted = np.concatenate([np.full((n, 1), np.nan), y[:, : TRAIN - 1]], axis=1)
        path = np.repeat(y[:, TRAIN - 1 : TRAIN], h, axis=1)
        half = Z95 * sd * np.sqrt(steps) * np.ones((n, 1))
    if s.model == "shifted":
        path = path + sd
    elif s.model == "mean":
        path = np.repeat(y[:, :TRAIN].mean(axis=1, keepdims=True), h, axis=1)
        fitted = np.repeat(y[:, :TRAIN].mean(axis=1, keepdims=True), TRAIN, axis=1)
        half = np.full((n, h), Z95 * y[:, :TRAIN].std(axis=1, keepdims=True))
    elif s.model == "narrow":
        half = half * Z80 / Z95
    return make_batch(
        y[:, :TRAIN],
        fitted,
        ids=[f"series-{i}" for i in range(n)],
        season_length=m if s.process == "seasonal" else 1,
        holdout_actuals=y[:, TRAIN:],
        holdout_forecasts=path,
        holdout_lower=path - half,
        holdout_upper=path + half,
        level=0.95,
    )


def holdout_table(reps: int, seed: int) -> None:
    print("\n## Holdouts (fleets of 200)\n")
    print("| condition | H | fleets | fail | warn or fail | from | target |")
    print("|---|---|---|---|---|---|---|")
    policy = default_policy()
    for s_i, s in enumerate(HOLDOUT):
        for h in s.horizons:
            rng = np.random.default_rng(seed + 9000 + 100 * s_i + h)
            fails = warns = 0
            culprits: dict[str, int] = {}
            for _ in range(reps):
                a = assess_many([(holdout_fleet(s, 200, h, rng), policy)])[0]
                v = a.verdict.value
                fails += v == "fail"
                warns += v != "pass"
                if v != "pass":
                    bad = "fail" if v == "fail" else "warn"
                    for c in {r.check for r in a.reasons if r.status.value == bad}:
                        culprits[c] = culprits.get(c, 0) + 1
            print(
                f"| {s.label} | {h} | {reps} | {fails / reps:.1%} | {warns / reps:.1%} | "
                f"{_culprits(culprits, reps)} | {s.target} |",
                flush=True,
            )


@dataclass(frozen=True)
class BaselineScenario:
    """A new version against the version in production on the same holdout: the baseline's
    errors are independent of the new version's, ``sd_ratio`` times smaller (the new version's
    holdout errors have ``sd_ratio`` times the baseline's standard deviation)."""

    label: str
    sd_ratio: float
    target: str = ""
    phi: float = 0.0
    """Above 0: each version's errors are AR(1) ``phi`` along the path (unit variance scaled
    to its sd), as the errors of forecasts from one origin tend to be."""


BASELINE = (
    BaselineScenario(
        "equal quality: independent errors of the same size", 1.0, "fail <= 1%, warn <= 5%"
    ),
    BaselineScenario("challenger errors 5% larger sd", 1.05),
    BaselineScenario("challenger errors 10% larger sd", 1.10, "fail >= 95%"),
    BaselineScenario(
        "equal quality, both versions' errors AR(1) 0.5 along the path",
        1.0,
        "fail <= 1%, warn <= 5%",
        phi=0.5,
    ),
    BaselineScenario("challenger errors 10% larger sd, AR(1) 0.5 along the path", 1.10, phi=0.5),
)
BASELINE_SERIES = 500
BASELINE_H = 12


def baseline_fleet(s: BaselineScenario, n: int, h: int, rng: np.random.Generator):
    """A batch of ``n`` invented series (``holdout_fleet``'s correct level model over an
    ``h``-step holdout) with a baseline version: the new version's holdout errors have
    standard deviation ``sd_ratio * 5``, the baseline's 5, the two independent; each version's
    95% intervals are its forecast +- 1.96 times its own error sd."""
    sound = holdout_fleet(HOLDOUT[0], n, h, rng)
    hold = sound.holdout
    sd = 5.0
    if s.phi:
        # Errors drawn along the path: AR(1) with unit variance, times each version's sd.
        unit = np.sqrt(1.0 - s.phi**2)
        new = hold.actuals - s.sd_ratio * sd * unit * ar1(n, h, rng, phi=s.phi)
        base = hold.actuals - sd * unit * ar1(n, h, rng, phi=s.phi)
    else:
        # The correct forecast's errors have sd 5; independent noise brings them to
        # sd_ratio * 5.
        extra = sd * np.sqrt(s.sd_ratio**2 - 1.0)
        new = hold.forecasts - extra * rng.standard_normal((n, h))
        base = hold.actuals - sd * rng.standard_normal((n, h))
    half_new, half_base = Z95 * sd * s.sd_ratio, Z95 * sd
    return make_batch(
        sound.actuals,
        sound.fitted,
        ids=list(sound.ids),
        holdout_actuals=hold.actuals,
        holdout_forecasts=new,
        holdout_lower=new - half_new,
        holdout_upper=new + half_new,
        level=0.95,
        baseline_forecasts=base,
        baseline_lower=base - half_base,
        baseline_upper=base + half_base,
        baseline_label="2026.11",
    )


def baseline_table(
    reps: int, seed: int, n: int = BASELINE_SERIES, only: tuple[int, ...] | None = None
) -> None:
    print(f"\n## Against a baseline version (fleets of {n}, {BASELINE_H}-step holdout)\n")
    print(
        "| condition | fleets | fail | warn or fail | baseline_accuracy fail | "
        "baseline_accuracy warn | median relative MAE | from | target |"
    )
    print("|---|---|---|---|---|---|---|---|---|")
    policy = default_policy()
    for s_i, s in enumerate(BASELINE):
        if only is not None and s_i not in only:
            continue
        rng = np.random.default_rng(seed + 20000 + 100 * s_i)
        fails = warns = own_fail = own_warn = 0
        rel: list[float] = []
        culprits: dict[str, int] = {}
        for _ in range(reps):
            a = assess_many([(baseline_fleet(s, n, BASELINE_H, rng), policy)])[0]
            v = a.verdict.value
            fails += v == "fail"
            warns += v != "pass"
            # The check's own outcome: its fleet-level test or its share of series.
            summary = next(c for c in a.summaries if c.name == "baseline_accuracy")
            own = max(a.fleet["baseline"].code, {"fail": 3, "warn": 2}.get(summary.status, 1))
            own_fail += own == 3
            own_warn += own >= 2
            rel.append(a.fleet["baseline"].result.relative_mae)
            if v != "pass":
                bad = "fail" if v == "fail" else "warn"
                for c in {r.check for r in a.reasons if r.status.value == bad}:
                    culprits[c] = culprits.get(c, 0) + 1
        print(
            f"| {s.label} | {reps} | {fails / reps:.1%} | {warns / reps:.1%} | "
            f"{own_fail / reps:.1%} | {own_warn / reps:.1%} | {np.median(rel):.3f} | "
            f"{_culprits(culprits, reps)} | {s.target} |",
            flush=True,
        )


def fleet(s: Scenario, n: int, t: int, rng: np.random.Generator):
    """A batch of ``n`` invented series: level around 100, the scenario's residuals."""
    e = GENERATORS[s.kind](n, t, rng, **s.params)
    noise = 5.0 if not s.level_sd else 100.0 * s.level_sd
    level = rng.uniform(50, 150, size=(n, 1)) if not s.level_sd else np.full((n, 1), 100.0)
    actuals = level + noise * rng.standard_normal((n, t))
    scale = 1.0 if not s.level_sd else noise
    fitted = actuals - scale * e
    if s.missing:
        fitted = np.where(rng.random((n, t)) < s.missing, np.nan, fitted)
    return make_batch(
        actuals, fitted, ids=[f"series-{i}" for i in range(n)], season_length=s.season_length
    )


def rates(s: Scenario, n: int, t: int, reps: int, seed: int) -> tuple[float, float, dict]:
    """(fail rate, warn-or-worse rate, checks behind the warns) over ``reps`` fleets."""
    rng = np.random.default_rng(seed)
    policy = default_policy()
    fails = warns = 0
    culprits: dict[str, int] = {}
    # Small fleets are assessed many at a time (assess_many stacks same-shape batches).
    step = max(1, min(reps, 4000 // max(n, 1)))
    done = 0
    while done < reps:
        batch = [(fleet(s, n, t, rng), policy) for _ in range(min(step, reps - done))]
        for a in assess_many(batch):
            verdict = a.verdict.value
            fails += verdict == "fail"
            warns += verdict in ("fail", "warn")
            if verdict != "pass":
                for r in {r.check for r in a.reasons}:
                    culprits[r] = culprits.get(r, 0) + 1
        done += len(batch)
    return fails / reps, warns / reps, culprits


def _culprits(c: dict[str, int], reps: int) -> str:
    top = sorted(c.items(), key=lambda kv: -kv[1])[:3]
    return ", ".join(f"{k} {v / reps:.1%}" for k, v in top) or "-"


def size_table(reps: int, small_reps: int, seed: int) -> None:
    print("\n## Sound models (size)\n")
    print("| condition | T | series | fleets | fail | warn or fail | warns from | target |")
    print("|---|---|---|---|---|---|---|---|")
    for s_i, s in enumerate(SIZE):
        for t in s.lengths:
            for n in s.sizes:
                r = (reps if n >= 200 else small_reps) if n <= 1000 else max(reps // 10, 20)
                fail, warn, why = rates(s, n, t, r, seed + 1000 * s_i + 10 * t + n)
                print(
                    f"| {s.label} | {t} | {n} | {r} | {fail:.1%} | {warn:.1%} | "
                    f"{_culprits(why, r)} | {s.target} |",
                    flush=True,
                )


def detect_table(reps: int, small_reps: int, seed: int) -> None:
    print("\n## Flawed models (detection)\n")
    print("| condition | T | series | fleets | fail | warn or fail | from | target |")
    print("|---|---|---|---|---|---|---|---|")
    for s_i, s in enumerate(DETECT):
        for t in s.lengths:
            for n in s.sizes:
                r = (reps if n >= 200 else small_reps) if n <= 1000 else max(reps // 10, 20)
                fail, warn, why = rates(s, n, t, r, seed + 5000 + 1000 * s_i + 10 * t + n)
                print(
                    f"| {s.label} | {t} | {n} | {r} | {fail:.1%} | {warn:.1%} | "
                    f"{_culprits(why, r)} | {s.target} |",
                    flush=True,
                )


def per_series_table(series: int, seed: int) -> None:
    """Raw per-series rejection rates of the bias and autocorrelation tests (one big batch)."""
    print("\n## Per-series tests under sound residuals (raw p-values)\n")
    print("| residuals | T | series | bias 1% | bias 5% | autocorr. 1% | autocorr. 5% |")
    print("|---|---|---|---|---|---|---|")
    rng = np.random.default_rng(seed)
    for label, kind, params in (
        ("white noise", "white", {}),
        ("GARCH(1,1) 0.1/0.1/0.8", "garch", {"omega": 0.1, "alpha": 0.1, "beta": 0.8}),
        ("t(3)", "t3", {}),
        ("centred lognormal", "lognormal", {}),
    ):
        for t in (20, 30, 52, 104, 156):
            s = Scenario(label, kind, (t,), params)
            checks = run_checks(fleet(s, series, t, rng), only=("bias", "ljung_box"))
            cells = []
            for name in ("bias", "ljung_box"):
                p = checks[name].p_value
                p = p[~np.isnan(p)]
                cells += [f"{(p < 0.01).mean():.2%}", f"{(p < 0.05).mean():.2%}"]
            print(f"| {label} | {t} | {series} | " + " | ".join(cells) + " |", flush=True)


def cell_table(cell: str, seeds: int, small_reps: int, reps: int, seed: int) -> None:
    """One cell of the size or detection tables (``label,T,series``) at its own seed and the
    ``seeds - 1`` next ones, each run on its own, then pooled: a cell's figure at one seed is
    one draw, and the pooled figure has ``sqrt(seeds)`` times less standard error."""
    label, t_text, n_text = cell.rsplit(",", 2)
    t, n = int(t_text), int(n_text)
    # Each table's seeds as size_table and detect_table make them (detection: 5000 further).
    found = [
        (offset, s_i, s)
        for offset, table in ((0, SIZE), (5000, DETECT))
        for s_i, s in enumerate(table)
        if s.label == label and t in s.lengths and n in s.sizes
    ]
    if not found:
        raise SystemExit(f"no cell {cell!r} in the size or detection tables")
    offset, s_i, s = found[0]
    r = (reps if n >= 200 else small_reps) if n <= 1000 else max(reps // 10, 20)
    print(f"\n## {label}, T = {t}, fleets of {n}: {seeds} seeds of {r} fleets\n")
    print("| seed | fleets | fail | warn or fail | from |")
    print("|---|---|---|---|---|")
    total_fail = total_warn = 0.0
    for k in range(seeds):
        cell_seed = seed + offset + 1000 * s_i + 10 * t + n + k
        fail, warn, why = rates(s, n, t, r, cell_seed)
        total_fail += fail
        total_warn += warn
        print(f"| {cell_seed} | {r} | {fail:.2%} | {warn:.1%} | {_culprits(why, r)} |", flush=True)
    print(f"| pooled | {r * seeds} | {total_fail / seeds:.2%} | {total_warn / seeds:.1%} | |")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--reps", type=int, default=1000, help="fleets of 200 per cell")
    parser.add_argument("--small-reps", type=int, default=5000, help="fleets of 1 or 5 per cell")
    parser.add_argument("--series", type=int, default=20000, help="series per per-series cell")
    parser.add_argument("--seed", type=int, default=20261203)
    parser.add_argument(
        "--conditions",
        type=lambda v: tuple(int(x) for x in v.split(",")),
        default=None,
        help="baseline rows to run, by position (0,1,...): default all",
    )
    parser.add_argument(
        "--only", choices=("size", "detect", "holdout", "series", "baseline"), default=None
    )
    parser.add_argument(
        "--cell", default=None, help='one cell again: "label,T,series" (see --seeds)'
    )
    parser.add_argument("--seeds", type=int, default=1, help="seeds for --cell (default 1)")
    args = parser.parse_args()
    start = time.perf_counter()
    if args.cell is not None:
        cell_table(args.cell, args.seeds, args.small_reps, args.reps, args.seed)
        print(f"\nelapsed {time.perf_counter() - start:.0f} s")
        return
    print(f"default policy; {args.reps} fleets of 200, {args.small_reps} fleets of 1 or 5")
    if args.only in (None, "size"):
        size_table(args.reps, args.small_reps, args.seed)
    if args.only in (None, "detect"):
        detect_table(args.reps, args.small_reps, args.seed)
    if args.only in (None, "holdout"):
        holdout_table(args.reps, args.seed)
    if args.only in (None, "series"):
        per_series_table(args.series, args.seed)
    if args.only in (None, "baseline"):
        baseline_table(args.reps, args.seed, only=args.conditions)
    print(f"\nelapsed {time.perf_counter() - start:.0f} s")


if __name__ == "__main__":
    main()
