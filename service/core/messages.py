"""Sentences for the fleet's reasons; each check's own sentences are declared beside it
(``CheckDef.passed``, ``found`` and ``meaning``)."""

from __future__ import annotations

from .registry import FAIL, WARN, CheckDef, checks_by_name


def pass_message(name: str) -> str:
    """The short sentence for a check that passed."""
    return checks_by_name()[name].passed


def fleet_message(
    name: str,
    code: int,
    failed: int,
    warned: int,
    tested: int,
    failed_share: float,
    warned_share: float,
    fail_share: float,
    warn_share: float,
    critical: bool,
) -> str:
    """The fleet-level sentence for one check."""
    check = checks_by_name()[name]
    title = check.title
    if tested == 0:
        return f"{title}: no series could be tested."
    if code < WARN and failed == 0 and warned == 0:
        return f"{title}: none of the {tested} series tested fails or warns."
    head = (
        f"{title}: {failed} of {tested} series fail and {warned} warn "
        f"({failed_share:.1%} of the weight fails, {warned_share:.1%} warns)"
    )
    if code >= FAIL:
        why = (
            " including a critical series"
            if critical and failed_share <= fail_share
            else f", above the fail share of {fail_share:.1%}"
        )
        return f"{head}{why}; {check.meaning}."
    if code >= WARN:
        why = (
            " including a critical series"
            if critical and failed_share + warned_share <= warn_share
            else f", above the warn share of {warn_share:.1%}"
        )
        return f"{head}{why}; {check.meaning}."
    return f"{head}, {WITHIN_SHARES}."


WITHIN_SHARES = "within the policy's shares"
_HEAD_END = " warns)"


def fleet_message_rest(title: str, message: str) -> str:
    """What :func:`fleet_message` says beyond the counts a table shows beside it: why the
    check warns or fails (the share passed, a critical series) and what to do, or that the
    counts are within the policy's shares; empty when no series fails or warns."""
    text = message.removeprefix(f"{title}: ")
    if text.startswith("none of the ") and text.endswith(" fails or warns."):
        return ""
    cut = text.find(_HEAD_END)
    rest = text if cut < 0 else text[cut + len(_HEAD_END) :].lstrip(",; ")
    return rest[:1].upper() + rest[1:]


def untested_message(name: str, code: int, untested: int, size: int, share: float) -> str:
    """The fleet-level sentence for an essential check that could not test enough series."""
    check = checks_by_name()[name]
    if untested >= size:
        return (
            f"{check.title}: could not be tested on any of the {size} series; a gate that "
            "cannot test an essential property does not pass: see each series' reason."
        )
    return (
        f"{check.title}: could not be tested on {untested} of {size} series ({share:.1%} of "
        "the weight); those series cannot pass: see each series' reason."
    )


def not_tested_message(check: CheckDef, why: object) -> str:
    """The series-level sentence for an essential check that could not run on the series."""
    return (
        f"{check.title.lower()} could not be tested ({why}): without it the series cannot "
        "pass; supply more usable residuals or check why they are missing."
    )
