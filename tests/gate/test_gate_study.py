"""Fast version of the gate simulation study: guards the direction of each figure.

The full study (tests/perf/gate_study.py, 1,000 fleets a cell) is summarised in the README;
these few replications only check that sound fleets rarely fail and flawed ones are caught.
"""

from __future__ import annotations

import sys
from pathlib import Path

import pytest

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "perf"))

from gate_study import rates

REPS = 20


@pytest.mark.parametrize("t", [52, 104])
def test_sound_fleets_rarely_fail(t):
    fail, _ = rates("white", 0.0, t, REPS, seed=t)
    assert fail <= 1 / REPS


@pytest.mark.parametrize(("kind", "param"), [("bias", 0.5), ("ar1", 0.5)])
def test_flawed_fleets_fail_at_t104(kind, param):
    fail, _ = rates(kind, param, 104, REPS, seed=5)
    assert fail >= 0.95


def test_arch_residuals_warn_without_failing():
    fail, warn = rates("arch1", 0.5, 104, REPS, seed=9)
    assert warn >= 0.9
    assert fail <= 1 / REPS
