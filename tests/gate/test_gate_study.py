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

from gate_study import BASELINE, BASELINE_H, BASELINE_SERIES, DETECT, SIZE, baseline_fleet, fleet

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


# --- Against a baseline version (the study's baseline rows, 500 series, 12-step holdout) -----

BASELINES = {s.label: s for s in BASELINE}


def _against_baseline(label: str, seed: int):
    s = BASELINES[label]
    batch = baseline_fleet(s, BASELINE_SERIES, BASELINE_H, np.random.default_rng(seed))
    a = assess(batch, default_policy())
    found = a.fleet["baseline"]
    own = {r.status.value for r in a.reasons if r.check == "baseline_accuracy"}
    return a, found, own


def test_an_equally_good_challenger_passes_the_baseline_comparison():
    a, found, own = _against_baseline("equal quality: independent errors of the same size", 21)
    assert a.verdict.value == "pass" and found.code == 1 and not own
    s = found.result
    assert s.matched_series == s.series_used == 500 and s.matched_periods == 6000
    assert s.ci_low < 1.0 < s.ci_high and s.series_worse == 0
    # Both versions' 95% intervals are calibrated: coverage near 0.95 for each.
    assert abs(s.coverage_new - 0.95) < 0.02 and abs(s.coverage_baseline - 0.95) < 0.02


def test_a_challenger_with_ten_percent_larger_errors_fails_on_the_baseline():
    a, found, own = _against_baseline("challenger errors 10% larger sd", 22)
    assert a.verdict.value == "fail" and found.code == 3 and "fail" in own
    assert found.result.ci_low > 1.0 + found.result.margin
    # The README's example sentence (section "The gate", "Against the version in production").
    reason = next(r for r in a.reasons if r.check == "baseline_accuracy" and r.series_id is None)
    assert reason.message == (
        "This version is 9.6% less accurate than version 2026.11 on 500 matched series "
        "(relative MAE 1.096, 95% CI 1.067-1.125; p = 7.5e-08 that it exceeds 1 + 0.02, "
        "1.5e-11 that it exceeds 1); 0 series are significantly worse on their own "
        "(BH-adjusted p < 0.01, beyond the margin): do not ship this version until the loss "
        "is explained."
    )
