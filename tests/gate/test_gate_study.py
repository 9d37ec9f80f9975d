"""The gate study's scenarios, one fixed-seed fleet each: the verdict and the checks behind it.

The study itself (tests/perf/gate_study.py, 1,000 fleets a cell, run by hand) measures the rates
in the README; these fleets only pin down that its generators and the default policy still give
the verdicts each scenario is about, exactly, for one seed.
"""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np
import pytest

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "perf"))

from gate_study import DETECT, SIZE, fleet

from service.core import assess, default_policy

SCENARIOS = {s.label: s for s in (*SIZE, *DETECT)}


def _verdict(label: str, n: int, t: int, seed: int):
    batch = fleet(SCENARIOS[label], n, t, np.random.default_rng(seed))
    result = assess(batch, default_policy())
    return result.verdict.value, {r.check for r in result.reasons if r.status.value == "fail"}


@pytest.mark.parametrize("n", [1, 5, 200])
def test_a_sound_fleet_passes(n):
    verdict, failed = _verdict("sound: white noise", n, 104, seed=11)
    assert verdict == "pass" and not failed


@pytest.mark.parametrize(
    ("label", "checks"),
    [("bias 0.5 sd", {"bias"}), ("AR(1) phi 0.5", {"ljung_box"})],
)
def test_a_flawed_fleet_fails_on_its_flaw(label, checks):
    verdict, failed = _verdict(label, 200, 104, seed=5)
    assert verdict == "fail" and checks <= failed


def test_arch_residuals_warn_without_failing():
    verdict, failed = _verdict("ARCH(1) alpha 0.5", 200, 104, seed=9)
    assert verdict == "warn" and not failed
