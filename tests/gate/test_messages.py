"""The fleet's per-check sentences: said once, and short where nothing fails or warns."""

from __future__ import annotations

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
