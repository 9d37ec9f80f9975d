"""Gate policies: defaults, validation naming the field, JSON round trip."""

from __future__ import annotations

import json

import pytest
from hypothesis import given
from hypothesis import strategies as st

from service.core import CHECK_NAMES, InputError
from service.core.policy import DEFAULT_CHECKS, Policy, PolicyError, default_policy


def test_default_policy_follows_the_hierarchy():
    p = default_policy()
    assert p.name == "default" and p.version == 1
    # Essential properties and a recent shift can fail a model: warn at adjusted p < 0.05,
    # fail at < 0.01 (each divided by its family's size), when material.
    for name in ("bias", "ljung_box"):
        assert (p.check(name).warn_p, p.check(name).fail_p) == (0.05, 0.01)
    assert (p.check("tracking_signal").warn_p, p.check("tracking_signal").fail_p) == (0.05, 0.005)
    for name in ("bias", "tracking_signal"):
        assert (p.check(name).option("min_sd"), p.check(name).option("min_percent")) == (0.1, 1)
    assert (p.check("bias").fleet_warn_p, p.check("bias").fleet_fail_p) == (0.05, 0.01)
    # Useful but not essential: warn only.
    for name in ("arch_lm", "jarque_bera"):
        assert p.check(name).fail_p is None and p.check(name).warn_p is not None
    # A series with no usable residual fails; fewer than 20 warns.
    assert (p.check("data_sufficiency").fail_below, p.check("data_sufficiency").warn_below) == (
        1,
        20,
    )
    assert p.fleet.family == "bonferroni" and p.fleet.weighting == "auto"
    # Holdout: scale-free errors are reported, not judged; a benchmark comparison, holdout
    # bias and coverage decide, the fleet's pooled tests able to fail it.
    for name in ("mase", "rmsse"):
        assert p.check(name).warn_above is None and p.check(name).fail_above is None
    assert (p.check("benchmark_skill").fail_p, p.check("benchmark_skill").option("margin")) == (
        0.01,
        0.05,
    )
    for name in ("holdout_bias", "interval_coverage"):
        assert p.check(name).fail_p is None and p.check(name).fleet_fail_p == 0.01
    assert set(DEFAULT_CHECKS) == set(CHECK_NAMES)


def test_policy_round_trips_through_json_unchanged():
    p = default_policy()
    again = Policy.from_dict(json.loads(json.dumps(p.to_dict())))
    assert again == p
    assert again.to_dict() == p.to_dict()


@given(
    warn=st.floats(0.001, 0.2),
    ratio=st.floats(0.01, 1.0),
    lags=st.none() | st.integers(1, 60),
    window=st.integers(2, 52),
    weighting=st.sampled_from(["volume", "count", "given"]),
    critical=st.lists(st.text(min_size=1, max_size=8), max_size=3),
    enabled=st.booleans(),
)
def test_any_valid_policy_round_trips(warn, ratio, lags, window, weighting, critical, enabled):
    doc = {
        "name": "nightly-strict",
        "version": 3,
        "checks": {
            "ljung_box": {"warn_p": warn, "fail_p": warn * ratio, "lags": lags},
            "tracking_signal": {"window": window, "enabled": enabled},
            "mase": {"warn_above": 1.0, "fail_above": 1.0 + ratio},
        },
        "fleet": {"weighting": weighting, "critical_series": critical, "fail_share": 0.1},
    }
    p = Policy.from_dict(doc)
    assert Policy.from_dict(json.loads(json.dumps(p.to_dict()))) == p
    assert p.check("tracking_signal").enabled is enabled
    assert p.check("ljung_box").option("lags") == lags
    assert p.fleet.critical_series == tuple(critical)


@pytest.mark.parametrize(
    ("doc", "loc"),
    [
        ({"checks": {"bias": {"fail_p": 2}}}, "checks.bias.fail_p"),
        ({"checks": {"bias": {"fail_p": 0.1, "warn_p": 0.05}}}, "checks.bias.fail_p"),
        ({"checks": {"bias": {"lags": 4}}}, "checks.bias.lags"),
        ({"checks": {"ljung_box": {"lags": 0}}}, "checks.ljung_box.lags"),
        ({"checks": {"ljung_box": {"lags": True}}}, "checks.ljung_box.lags"),
        ({"checks": {"ljung_box": {"lag1_weight": -1}}}, "checks.ljung_box.lag1_weight"),
        ({"checks": {"ljung_box": {"lag1_weight": "two"}}}, "checks.ljung_box.lag1_weight"),
        ({"checks": {"tracking_signal": {"window": 1}}}, "checks.tracking_signal.window"),
        ({"checks": {"mase": {"warn_p": 0.05}}}, "checks.mase.warn_p"),
        ({"checks": {"mase": {"warn_above": 3, "fail_above": 2}}}, "checks.mase.warn_above"),
        ({"checks": {"nonsense": {}}}, "checks.nonsense"),
        ({"checks": {"bias": "on"}}, "checks.bias"),
        ({"checks": {"bias": {"enabled": "yes"}}}, "checks.bias.enabled"),
        ({"checks": {"bias": {"warn_p": float("nan")}}}, "checks.bias.warn_p"),
        ({"fleet": {"weighting": "revenue"}}, "fleet.weighting"),
        ({"fleet": {"adjustment": "holm"}}, "fleet.adjustment"),
        ({"fleet": {"fail_share": 1.5}}, "fleet.fail_share"),
        ({"fleet": {"critical_series": "depot-1"}}, "fleet.critical_series"),
        ({"fleet": {"colour": "red"}}, "fleet.colour"),
        ({"name": ""}, "name"),
        ({"version": 0}, "version"),
        ({"extra": 1}, "extra"),
    ],
)
def test_invalid_policies_name_the_field(doc, loc):
    with pytest.raises(PolicyError) as info:
        Policy.from_dict(doc)
    assert loc in [e["loc"] for e in info.value.errors]
    assert isinstance(info.value, InputError)


def test_every_problem_is_reported_at_once():
    with pytest.raises(PolicyError) as info:
        Policy.from_dict(
            {"checks": {"bias": {"fail_p": -1}, "mase": {"lags": 2}}, "fleet": {"weighting": "x"}}
        )
    assert {e["loc"] for e in info.value.errors} == {
        "checks.bias.fail_p",
        "checks.mase.lags",
        "fleet.weighting",
    }


def test_unnamed_checks_keep_defaults_and_disabled_checks_are_off():
    p = Policy.from_dict({"checks": {"jarque_bera": {"enabled": False}}})
    assert "jarque_bera" not in p.enabled_checks
    assert p.check("bias") == DEFAULT_CHECKS["bias"]


def test_a_policy_can_leave_lag_1_to_the_portmanteau():
    # Invented fleet: lag1_weight 0 in the policy reaches the check (no lag-1 regression).
    import numpy as np

    from service.core import assess, make_batch

    rng = np.random.default_rng(1)
    actuals = 100 + rng.normal(size=(3, 60))
    fitted = actuals - rng.normal(size=(3, 60))
    doc = {"name": "invented-no-lag1", "checks": {"ljung_box": {"lag1_weight": 0}}}
    policy = Policy.from_dict(doc)
    result = assess(make_batch(actuals, fitted, ids=["x", "y", "z"]), policy).result().to_dict()
    for series in result["series"]:
        lb = next(c for c in series["checks"] if c["name"] == "ljung_box")
        assert lb["details"]["lag1_p_value"] is None and lb["details"]["short_first_lag"] == 1
