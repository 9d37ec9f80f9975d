"""The fleet's per-check sentences: said once, and short where nothing fails or warns."""

from __future__ import annotations

import numpy as np

from service.core import assess, default_policy, make_batch
from service.core.messages import fleet_message, fleet_message_rest
from service.core.registry import FAIL, PASS, WARN, checks_by_name


def _message(code: int, failed: int, warned: int, **kw) -> str:
    args = dict(
        tested=4,
        failed_share=failed / 4,
        warned_share=warned / 4,
        fail_share=0.05,
        warn_share=0.02,
        critical=False,
    )
    args.update(kw)
    return fleet_message("bias", code, failed, warned, **args)


def test_nothing_failing_or_warning_is_one_short_sentence() -> None:
    m = _message(PASS, 0, 0)
    assert m == "Bias: none of the 4 series tested fails or warns."
    assert fleet_message_rest("Bias", m) == ""


def test_what_a_table_adds_to_its_counts() -> None:
    meaning = checks_by_name()["bias"].meaning
    failing = _message(FAIL, 4, 0)
    assert failing == (
        "Bias: 4 of 4 series fail and 0 warn (100.0% of the weight fails, 0.0% warns), "
        f"above the fail share of 5.0%; {meaning}."
    )
    assert fleet_message_rest("Bias", failing) == f"Above the fail share of 5.0%; {meaning}."
    warning = _message(WARN, 0, 1, critical=True, warned_share=0.01)
    assert fleet_message_rest("Bias", warning) == f"Including a critical series; {meaning}."
    within = _message(PASS, 0, 1, warned_share=0.01, warn_share=0.05)
    assert within.endswith("(0.0% of the weight fails, 1.0% warns), within the policy's shares.")
    assert fleet_message_rest("Bias", within) == "Within the policy's shares."
    assert fleet_message_rest("Bias", "Bias: no series could be tested.") == (
        "No series could be tested."
    )


def _seasonal_ar_series(seed: int, phi: float = 0.6, lag: int = 7, t: int = 60) -> np.ndarray:
    """Zero-mean residuals with a seasonal AR term, ``e_t = phi e_{t-lag} + z_t`` (invented)."""
    rng = np.random.default_rng(seed)
    z = rng.standard_normal(t + 70)
    e = np.zeros_like(z)
    for k in range(len(z)):
        e[k] = z[k] + (phi * e[k - lag] if k >= lag else 0.0)
    return e[70:]


def test_a_bias_reason_beside_autocorrelation_says_the_evidence_can_be_overstated() -> None:
    # Seed 6, found by trying seeds for one where both happen: the series fails on its seasonal
    # autocorrelation, and its zero-mean residuals still flag the bias test (the EWC variance's
    # cosines cannot follow a lag-7 dependence at T = 60).
    e = _seasonal_ar_series(6)
    b = make_batch(
        ids=["s"], actuals=(100 + e)[None], fitted=np.full((1, 60), 100.0), season_length=7
    )
    r = assess(b, default_policy())
    bias = [x for x in r.reasons if x.check == "bias" and x.series_id == "s"]
    lags = [x for x in r.reasons if x.check == "ljung_box" and x.series_id == "s"]
    assert bias and lags
    assert "also autocorrelated" in bias[0].message
    assert "remove the autocorrelation first" in bias[0].message


def test_a_bias_reason_on_white_residuals_has_no_autocorrelation_caveat() -> None:
    rng = np.random.default_rng(3)
    e = rng.standard_normal(104) + 1.0  # a 1 sd bias, no autocorrelation (invented)
    b = make_batch(ids=["s"], actuals=(100 + e)[None], fitted=np.full((1, 104), 100.0))
    r = assess(b, default_policy())
    bias = [x for x in r.reasons if x.check == "bias" and x.series_id == "s"]
    assert bias and bias[0].status == "fail"
    assert not [x for x in r.reasons if x.check == "ljung_box" and x.series_id == "s"]
    assert "also autocorrelated" not in bias[0].message
