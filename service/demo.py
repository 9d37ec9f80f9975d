"""``plumbline demo``: an invented scenario, written to files and assessed offline.

**The data are invented.** Wrenfield Cycle Share is a fictional bike-share network in a fictional
city; its docks, their pick-up counts and the three forecasting models below are simulated here
from a fixed seed, so every run writes the same files and gets the same verdicts.

Daily bike pick-ups per dock follow a weekly cycle (commuter weekdays, quieter weekends, a
one waterfront dock busiest at the weekend) around each dock's own level, with Gaussian noise. Three
models forecast them (26 weeks of one-step fitted values, then a four-week holdout with 95%
intervals):

* ``wrenfield-pickups-weekday`` knows each dock's level and weekly profile: the sound model, its
  residuals are the noise alone;
* ``wrenfield-pickups-stale`` was fitted before the network grew and forecasts every dock about
  12% low: biased;
* ``wrenfield-pickups-shared-week`` gives every dock the commuter docks' shared weekly profile, so
  the waterfront dock's weekend peak stays in its residuals.

With the default policy the three get pass, fail and warn. The seed is one of those that show
each verdict once: a sound model can also warn by chance, at the error rates the policy allows
(one false warn in 24 docks is already more than the fleet's 2% warn share), so a verdict is
statistical evidence, not a guarantee.
"""

from __future__ import annotations

import datetime as dt
import json
import os
import sys
from dataclasses import dataclass
from typing import IO, Any

import numpy as np

SEED = 20261205
N_DOCKS = 24
TRAIN_DAYS = 26 * 7
HOLDOUT_DAYS = 28
SEASON = 7
START = dt.date(2026, 5, 4)  # a Monday
LEVEL = 0.95
Z95 = 1.959963984540054  # scipy.stats.norm.ppf(0.975)

# Pick-ups relative to the dock's level, Monday..Sunday (invented).
COMMUTER_WEEK = np.array([1.12, 1.10, 1.08, 1.08, 1.04, 0.82, 0.76])
WATERFRONT_WEEK = np.array([0.80, 0.78, 0.80, 0.84, 0.98, 1.44, 1.36])
WATERFRONT_LEVEL = 90.0  # the network's one waterfront dock, the last
NOISE_SHARE = 0.10  # noise sd as a share of the dock's level
STALE_FACTOR = 0.88  # the stale model's forecasts: 12% low


@dataclass(frozen=True)
class DemoModel:
    """One model of the scenario and the file it is written to."""

    file: str
    model: str
    story: str


MODELS = (
    DemoModel(
        "weekday.json",
        "wrenfield-pickups-weekday",
        "sound: each dock's own level and weekly profile",
    ),
    DemoModel(
        "stale.json",
        "wrenfield-pickups-stale",
        "biased: fitted before the network grew, about 12% low",
    ),
    DemoModel(
        "shared-week.json",
        "wrenfield-pickups-shared-week",
        "one shared weekly profile: the waterfront weekend peak is left in the residuals",
    ),
)
CSV_COPY = "weekday.csv"
VERSION = "demo-2026.12"

README = """\
INVENTED DEMO DATA - Wrenfield Cycle Share is a fictional bike-share network.
Nothing here describes a real place, company or model.

Daily bike pick-ups at {n} docks, {train} days of one-step fitted values and a {hold}-day holdout
with 95% intervals, from three invented forecasting models:

{models}

{csv} holds the same request as weekday.json in the CSV long format.

Assess one file yourself:
    plumbline assess {dir}/stale.json --offline
    plumbline assess {dir}/weekday.csv --offline --model wrenfield-pickups-weekday \\
        --version {version} --season-length 7
"""


def simulate() -> dict[str, Any]:
    """The invented network: dock ids, true weekly means, noise sd and the drawn pick-ups."""
    rng = np.random.default_rng(SEED)
    days = TRAIN_DAYS + HOLDOUT_DAYS
    level = np.round(rng.uniform(40.0, 160.0, N_DOCKS), 1)
    level[-1] = WATERFRONT_LEVEL
    profile = np.tile(COMMUTER_WEEK, (N_DOCKS, 1))
    profile[-1] = WATERFRONT_WEEK
    weekday = (np.arange(days) + START.weekday()) % SEASON
    mean = level[:, None] * profile[:, weekday]
    sd = NOISE_SHARE * level
    pickups = np.maximum(np.round(mean + sd[:, None] * rng.standard_normal(mean.shape)), 0.0)
    names = [f"dock-{i + 1:02d}" for i in range(N_DOCKS - 1)] + ["waterfront"]
    return {
        "ids": names,
        "level": level,
        "mean": mean,
        "sd": sd,
        "pickups": pickups,
        "weekday": weekday,
    }


def _fitted(world: dict[str, Any], model: str) -> np.ndarray:
    """Each model's one-step values over training and holdout (same rule for both)."""
    if model == "wrenfield-pickups-weekday":
        return world["mean"]
    if model == "wrenfield-pickups-stale":
        return STALE_FACTOR * world["mean"]
    shared = world["level"][:, None] * COMMUTER_WEEK[world["weekday"]][None, :]
    return shared


def request_body(world: dict[str, Any], spec: DemoModel) -> dict[str, Any]:
    """The ``POST /v1/assessments`` body of one model."""
    fitted = _fitted(world, spec.model)
    dates = [(START + dt.timedelta(days=d)).isoformat() for d in range(TRAIN_DAYS)]
    series = []
    for i, dock in enumerate(world["ids"]):
        train = slice(0, TRAIN_DAYS)
        hold = slice(TRAIN_DAYS, TRAIN_DAYS + HOLDOUT_DAYS)
        forecast = np.round(fitted[i, hold], 2)
        half = Z95 * world["sd"][i]
        series.append(
            {
                "id": dock,
                "actuals": world["pickups"][i, train].tolist(),
                "fitted": np.round(fitted[i, train], 2).tolist(),
                "timestamps": dates,
                "holdout": {
                    "actuals": world["pickups"][i, hold].tolist(),
                    "forecasts": forecast.tolist(),
                    "lower": np.round(forecast - half, 2).tolist(),
                    "upper": np.round(forecast + half, 2).tolist(),
                    "level": LEVEL,
                },
            }
        )
    return {
        "model": spec.model,
        "version": VERSION,
        "policy": "default",
        "season_length": SEASON,
        "model_params": 0,
        "labels": {"scenario": "invented demo: Wrenfield Cycle Share"},
        "series": series,
    }


def to_json(body: dict[str, Any]) -> str:
    """The body as JSON a person can read: one line per field of a series, arrays inline."""
    head = [f"  {json.dumps(k)}: {json.dumps(v)}" for k, v in body.items() if k != "series"]
    series = []
    for s in body["series"]:
        fields = ",\n     ".join(f"{json.dumps(k)}: {json.dumps(v)}" for k, v in s.items())
        series.append(f"    {{{fields}}}")
    return "{\n" + ",\n".join([*head, '  "series": [\n' + ",\n".join(series) + "\n  ]"]) + "\n}\n"


def to_csv(body: dict[str, Any]) -> str:
    """The same request in the CSV long format (model etc. go in query parameters/options)."""
    lines = ["series_id,timestamp,part,actual,fitted,lower,upper"]
    for s in body["series"]:
        for t, a, f in zip(s["timestamps"], s["actuals"], s["fitted"], strict=True):
            lines.append(f"{s['id']},{t},train,{a:g},{f:g},,")
        h = s["holdout"]
        start = dt.date.fromisoformat(s["timestamps"][-1])
        for k, (a, f, lo, hi) in enumerate(
            zip(h["actuals"], h["forecasts"], h["lower"], h["upper"], strict=True)
        ):
            day = (start + dt.timedelta(days=k + 1)).isoformat()
            lines.append(f"{s['id']},{day},holdout,{a:g},{f:g},{lo:g},{hi:g}")
    return "\n".join(lines) + "\n"


def write_demo(directory: str) -> list[str]:
    """Write the scenario's files to ``directory`` (created if needed); returns their paths."""
    os.makedirs(directory, exist_ok=True)
    world = simulate()
    paths = []
    for spec in MODELS:
        body = request_body(world, spec)
        path = os.path.join(directory, spec.file)
        with open(path, "w", encoding="utf-8") as fh:
            fh.write(to_json(body))
        paths.append(path)
        if spec.file == "weekday.json":
            csv_path = os.path.join(directory, CSV_COPY)
            with open(csv_path, "w", encoding="utf-8") as fh:
                fh.write(to_csv(body))
            paths.append(csv_path)
    readme = os.path.join(directory, "README.txt")
    with open(readme, "w", encoding="utf-8") as fh:
        fh.write(
            README.format(
                n=N_DOCKS,
                train=TRAIN_DAYS,
                hold=HOLDOUT_DAYS,
                csv=CSV_COPY,
                dir=directory,
                version=VERSION,
                models="\n".join(f"  {m.file:<17} {m.model}: {m.story}" for m in MODELS),
            )
        )
    paths.append(readme)
    return paths


def run_demo(directory: str, out: IO[str] | None = None) -> int:
    """Write the files, assess each offline, print one line per model; returns exit code 0."""
    from .cli.assess import assess_offline
    from .cli.errors import CliError
    from .cli.inputs import Overrides, load_input

    out = out if out is not None else sys.stdout
    try:
        write_demo(directory)
    except OSError as exc:
        raise CliError(f"cannot write the demo to {directory}: {exc.strerror or exc}") from None
    out.write(
        "INVENTED DEMO DATA: Wrenfield Cycle Share, a fictional bike-share network "
        f"({N_DOCKS} docks, {TRAIN_DAYS} days plus a {HOLDOUT_DAYS}-day holdout).\n"
        f"Files written to {directory}{os.sep}\n\n"
    )
    for spec in MODELS:
        path = os.path.join(directory, spec.file)
        result = assess_offline(load_input(path, Overrides()))
        first = result.reasons[0].message if result.reasons else "no check found a problem"
        out.write(f"  {result.verdict.upper():<4}  {spec.file:<17} {spec.story}\n")
        out.write(f"        {first}\n")
    out.write(
        "\nA verdict is statistical evidence, not a guarantee. See the reasons in full:\n"
        f"  plumbline assess {os.path.join(directory, 'stale.json')} --offline\n"
    )
    return 0
