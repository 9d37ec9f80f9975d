"""Gate policies: plain, versionable documents saying how evidence becomes a verdict.

A policy names, per check, whether it runs, the thresholds for warn and fail and the options
passed to the statistic (lags, window, minimum observations), and, for the fleet, how p-values are
adjusted across series, which share of the fleet may warn or fail, how series are weighted and
which series are critical. It round-trips through JSON unchanged: ``Policy.from_dict(p.to_dict())
== p``.

Default values (``default_policy``) follow the forecaster's hierarchy: uncorrelated residuals and
a zero mean are essential (``ljung_box`` and ``bias`` can fail a model), constant variance and
normality are useful but not essential (``arch_lm`` and ``jarque_bera`` only warn; what they
threaten, the intervals, ``interval_coverage`` checks directly). Each check's default rule is
declared beside the check (``CheckDef.rule``), with the reason for it; the simulation study in
``tests/perf`` measures what they give.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, field, fields, replace
from typing import Any, Literal

from .registry import CheckPolicy, all_checks, check_names, checks_by_name
from .types import InputError

Weighting = Literal["auto", "volume", "count", "given"]
Adjustment = Literal["bh", "none"]
Family = Literal["bonferroni", "none"]
WEIGHTINGS = ("auto", "volume", "count", "given")
ADJUSTMENTS = ("bh", "none")
FAMILIES = ("bonferroni", "none")


class PolicyError(InputError):
    """An invalid policy document; ``errors`` lists every problem found as ``{loc, message}``
    with ``loc`` a dotted path inside the policy (``checks.bias.fail_p``)."""

    def __init__(self, errors: list[dict[str, str]]) -> None:
        self.errors = errors
        first = errors[0]
        super().__init__(first["loc"], first["message"])
        self.args = ("; ".join(f"{e['loc']}: {e['message']}" for e in errors),)


@dataclass(frozen=True)
class FleetPolicy:
    """How series verdicts combine into the fleet's.

    ``adjustment``: ``"bh"`` adjusts each check's p-values across series with Benjamini-Hochberg,
    so a test threshold is a false discovery rate; ``"none"`` judges raw p-values.

    ``family``: ``"bonferroni"`` makes the fleet's fail decision one family of tests: each
    test that can fail the fleet (a check with ``fail_p``, a fleet-level test with
    ``fleet_fail_p``) is judged at its threshold divided by the number of such tests that ran,
    so a sound model fails at most at the largest ``fail_p`` whatever the fleet's size, a
    single series included; the warn decision (warn or worse) is a family of its own in the
    same way, at the warn thresholds. ``"none"`` judges each test at its own threshold.

    A check fails the fleet when the weighted share of tested series that fail exceeds
    ``fail_share``, and warns when the share that warn or fail exceeds ``warn_share``. Any fail
    on a ``critical_series`` fails the fleet; any warn there warns it.

    ``weighting``: ``"auto"`` uses a series' given weight and its volume where none is given;
    ``"given"`` the given weights (volume where missing); ``"volume"`` and ``"count"`` ignore
    weights, so a request that gives weights to a policy with either is refused.

    ``bias_warn_p``: the earlier name of ``checks.bias.fleet_warn_p``; when set it overrides it.
    """

    adjustment: Adjustment = "bh"
    warn_share: float = 0.02
    fail_share: float = 0.05
    weighting: Weighting = "auto"
    critical_series: tuple[str, ...] = ()
    bias_warn_p: float | None = None
    family: Family = "bonferroni"


# Each check's default rule, declared beside the check (common practice where marked there;
# the rest are this project's choices).
DEFAULT_CHECKS: Mapping[str, CheckPolicy] = {c.name: c.rule for c in all_checks()}


@dataclass(frozen=True)
class Policy:
    """A named, versioned gate policy."""

    name: str = "default"
    version: int = 1
    description: str = ""
    checks: Mapping[str, CheckPolicy] = field(default_factory=lambda: dict(DEFAULT_CHECKS))
    fleet: FleetPolicy = field(default_factory=FleetPolicy)

    def __eq__(self, other: object) -> bool:
        if not isinstance(other, Policy):
            return NotImplemented
        return self.to_dict() == other.to_dict()

    def __hash__(self) -> int:
        return hash((self.name, self.version))

    def check(self, name: str) -> CheckPolicy:
        return self.checks.get(name, CheckPolicy(enabled=False))

    @property
    def enabled_checks(self) -> tuple[str, ...]:
        return tuple(n for n in check_names() if self.check(n).enabled)

    def to_dict(self) -> dict[str, Any]:
        """JSON-serialisable form; unused (``None``) fields are left out."""
        checks = {}
        for name in check_names():
            if name in self.checks:
                cp = self.checks[name]
                allowed = allowed_fields(name)
                doc = {
                    f.name: getattr(cp, f.name)
                    for f in fields(CheckPolicy)
                    if f.name in allowed and getattr(cp, f.name) is not None
                }
                doc.update((k, v) for k, v in cp.option_values if k in allowed and v is not None)
                checks[name] = doc
        fleet = {f.name: getattr(self.fleet, f.name) for f in fields(FleetPolicy)}
        fleet["critical_series"] = list(self.fleet.critical_series)
        return {
            "name": self.name,
            "version": self.version,
            "description": self.description,
            "checks": checks,
            "fleet": fleet,
        }

    @classmethod
    def from_dict(cls, document: Mapping[str, Any]) -> Policy:
        """Validate a policy document; every problem is reported in ``PolicyError.errors``.

        Checks not named keep the default policy's settings; a check given as
        ``{"enabled": false}`` is off. Fields not named keep their defaults.
        """
        return _parse_policy(document)


def default_policy() -> Policy:
    """The documented default policy (name ``default``, version 1)."""
    return Policy(description="Plumbline default gate policy")


# ----------------------------------------------------------------------------------- validation

_CHECK_FIELDS = {f.name for f in fields(CheckPolicy) if f.name != "option_values"}
_PROBABILITIES = ("warn_p", "fail_p", "warn_share", "fail_share", "fleet_warn_p", "fleet_fail_p")
_FLEET_FIELDS = {f.name: f for f in fields(FleetPolicy)}


def allowed_fields(name: str) -> frozenset[str]:
    """The policy fields that apply to check ``name``."""
    return checks_by_name()[name].policy_fields


def _option_fields() -> dict[str, Any]:
    """Every policy option of every check, by name (an option of one check is a known field
    that does not apply to the others)."""
    return {o.name: o for c in all_checks() for o in c.options if o.in_policy}


def _is_number(v: Any) -> bool:
    return isinstance(v, (int, float)) and not isinstance(v, bool) and math.isfinite(v)


def _is_int(v: Any) -> bool:
    return isinstance(v, int) and not isinstance(v, bool)


def _parse_check(name: str, raw: Any, errors: list[dict[str, str]]) -> CheckPolicy | None:
    loc = f"checks.{name}"
    if not isinstance(raw, Mapping):
        errors.append({"loc": loc, "message": "must be an object"})
        return None
    allowed = allowed_fields(name)
    base = DEFAULT_CHECKS.get(name, CheckPolicy())
    option_fields = _option_fields()
    values: dict[str, Any] = {}
    options = dict(base.option_values)
    for key, value in raw.items():
        where = f"{loc}.{key}"
        if key not in _CHECK_FIELDS and key not in option_fields:
            errors.append({"loc": where, "message": "unknown field"})
            continue
        if key not in allowed:
            errors.append({"loc": where, "message": f"does not apply to the {name} check"})
            continue
        if key in option_fields:
            problem = None if value is None else option_fields[key].problem(value)
            if problem:
                errors.append({"loc": where, "message": problem})
                continue
            options[key] = None if value is None else option_fields[key].value(value)
        elif value is None:
            values[key] = None
        elif key in ("enabled", "adjust"):
            if not isinstance(value, bool):
                errors.append({"loc": where, "message": "must be true or false"})
                continue
            values[key] = value
        elif key in (
            "warn_p",
            "fail_p",
            "warn_share",
            "fail_share",
            "fleet_warn_p",
            "fleet_fail_p",
        ):
            if not _is_number(value) or not 0 <= value <= 1:
                errors.append({"loc": where, "message": "must be a number between 0 and 1"})
                continue
            values[key] = float(value)
        else:  # warn_above, fail_above, warn_below, fail_below
            if not _is_number(value):
                errors.append({"loc": where, "message": "must be a finite number"})
                continue
            values[key] = float(value)
    # Options in the check's declared order, so documents round-trip in one order.
    declared = [o.name for o in checks_by_name()[name].options]
    values["option_values"] = tuple((k, options[k]) for k in declared if k in options)
    policy = replace(base, **values)
    for lo_key, hi_key, rule in (
        ("fail_p", "warn_p", "fail_p must not exceed warn_p"),
        ("fleet_fail_p", "fleet_warn_p", "fleet_fail_p must not exceed fleet_warn_p"),
        ("fail_share", "warn_share", None),
        ("warn_above", "fail_above", "warn_above must not exceed fail_above"),
        ("fail_below", "warn_below", "fail_below must not exceed warn_below"),
    ):
        lo, hi = getattr(policy, lo_key), getattr(policy, hi_key)
        if rule and lo is not None and hi is not None and lo > hi:
            errors.append({"loc": f"{loc}.{lo_key}", "message": rule})
    return policy


def _parse_fleet(raw: Any, errors: list[dict[str, str]]) -> FleetPolicy:
    if not isinstance(raw, Mapping):
        errors.append({"loc": "fleet", "message": "must be an object"})
        return FleetPolicy()
    values: dict[str, Any] = {}
    for key, value in raw.items():
        where = f"fleet.{key}"
        if key not in _FLEET_FIELDS:
            errors.append({"loc": where, "message": "unknown field"})
        elif key == "adjustment":
            if value not in ADJUSTMENTS:
                errors.append({"loc": where, "message": f"must be one of {', '.join(ADJUSTMENTS)}"})
            else:
                values[key] = value
        elif key in ("weighting", "family"):
            allowed = WEIGHTINGS if key == "weighting" else FAMILIES
            if value not in allowed:
                errors.append({"loc": where, "message": f"must be one of {', '.join(allowed)}"})
            else:
                values[key] = value
        elif key == "critical_series":
            if not isinstance(value, list) or not all(isinstance(s, str) for s in value):
                errors.append({"loc": where, "message": "must be a list of series ids"})
            else:
                values[key] = tuple(value)
        elif key == "bias_warn_p" and value is None:
            values[key] = None
        elif not _is_number(value) or not 0 <= value <= 1:
            errors.append({"loc": where, "message": "must be a number between 0 and 1"})
        else:
            values[key] = float(value)
    return replace(FleetPolicy(), **values)


def _parse_policy(document: Mapping[str, Any]) -> Policy:
    errors: list[dict[str, str]] = []
    if not isinstance(document, Mapping):
        raise PolicyError([{"loc": "", "message": "a policy must be a JSON object"}])
    known = {"name", "version", "description", "checks", "fleet"}
    for key in document:
        if key not in known:
            errors.append({"loc": str(key), "message": "unknown field"})
    name = document.get("name", "inline")
    if not isinstance(name, str) or not name.strip() or len(name) > 100:
        errors.append(
            {"loc": "name", "message": "must be a non-empty string of at most 100 characters"}
        )
        name = "inline"
    version = document.get("version", 1)
    if not _is_int(version) or version < 1:
        errors.append({"loc": "version", "message": "must be an integer >= 1"})
        version = 1
    description = document.get("description", "")
    if not isinstance(description, str):
        errors.append({"loc": "description", "message": "must be a string"})
        description = ""
    checks: dict[str, CheckPolicy] = dict(DEFAULT_CHECKS)
    raw_checks = document.get("checks", {})
    if not isinstance(raw_checks, Mapping):
        errors.append({"loc": "checks", "message": "must be an object keyed by check name"})
        raw_checks = {}
    for check_name, raw in raw_checks.items():
        if check_name not in checks_by_name():
            errors.append(
                {
                    "loc": f"checks.{check_name}",
                    "message": f"unknown check; known: {', '.join(check_names())}",
                }
            )
            continue
        parsed = _parse_check(check_name, raw, errors)
        if parsed is not None:
            checks[check_name] = parsed
    fleet = _parse_fleet(document.get("fleet", {}), errors)
    if errors:
        raise PolicyError(errors)
    return Policy(name=name, version=version, description=description, checks=checks, fleet=fleet)
