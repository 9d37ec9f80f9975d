"""The check registry: every check is declared once, in its family's module.

A family module under :mod:`service.core.checks` holds the statistics of one family and, in a
module-level ``CHECKS`` tuple, one :class:`CheckDef` per check: its name and title, what it
tests and its published source, the options a policy may set, the runner over a batch, its
default policy rule, its sentences, and whatever is special about its status. The catalogue,
the policy parser, the runner, the messages and the gate iterate over :func:`all_checks`; no
code outside a check's own module branches on its name.

Adding a check is adding a module to :mod:`service.core.checks` (found by
:func:`all_checks`, ordered by ``position``), its tests, and its row in the README.
"""

from __future__ import annotations

import importlib
import math
import pkgutil
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from functools import cache
from typing import TYPE_CHECKING, Any, Literal

import numpy as np

from . import fleet_parts
from .batch import Residuals, SeriesBatch
from .fleet_parts import FleetPart, combine
from .results import CheckKind, CheckResult

if TYPE_CHECKING:
    from .policy import Policy
    from .runner import BatchChecks

# Integer status codes, so that statuses combine with ``max``: fail > warn > pass > skipped.
SKIPPED, PASS, WARN, FAIL = 0, 1, 2, 3

TEST_THRESHOLDS = ("warn_p", "fail_p")
METRIC_THRESHOLDS = ("warn_above", "fail_above", "warn_below", "fail_below")


@dataclass(frozen=True)
class Option:
    """An option of a check's statistic (``lags``, ``window``...) or of its decision
    (``min_sd``...).

    ``kind`` is ``"int"`` (bounded below by ``minimum``), ``"float"`` (a finite number from
    ``minimum`` to ``maximum``), ``"choice"`` (one name from ``choices``) or ``"choices"`` (a
    list of distinct names from ``choices``, at least one). Options with ``in_policy=False``
    are accepted by :func:`service.core.run_checks` but not by policies (``ci_level``);
    options with ``for_runner=False`` are read by the check's decision (its ``material``
    rule) and not passed to the statistic.
    """

    name: str
    minimum: float = 0
    in_policy: bool = True
    kind: Literal["int", "float", "choice", "choices"] = "int"
    maximum: float | None = None
    choices: tuple[str, ...] = ()
    for_runner: bool = True

    def problem(self, value: Any) -> str | None:
        """Why ``value`` is not valid for this option, or ``None`` when it is."""
        if self.kind == "choice":
            if not isinstance(value, str) or value not in self.choices:
                return f"must be one of {', '.join(self.choices)}"
            return None
        if self.kind == "choices":
            if (
                not isinstance(value, list)
                or not value
                or not all(isinstance(v, str) and v in self.choices for v in value)
                or len(set(value)) != len(value)
            ):
                return f"must be a list of distinct names from {', '.join(self.choices)}"
            return None
        if self.kind == "float":
            number = isinstance(value, (int, float)) and not isinstance(value, bool)
            if (
                not number
                or not math.isfinite(value)
                or value < self.minimum
                or (self.maximum is not None and value > self.maximum)
            ):
                top = "" if self.maximum is None else f" and at most {self.maximum:g}"
                return f"must be a number of at least {self.minimum:g}{top}"
            return None
        if isinstance(value, bool) or not isinstance(value, int) or value < self.minimum:
            return f"must be an integer >= {self.minimum:g}"
        return None

    def value(self, raw: Any) -> Any:
        """The parsed value of a valid ``raw`` (floats as float, choices as a tuple)."""
        if self.kind == "float":
            return float(raw)
        if self.kind == "choices":
            return tuple(raw)
        return raw


@dataclass(frozen=True)
class CheckPolicy:
    """How one check is run and judged. Unused thresholds are ``None``.

    For tests, a series warns when its p-value (BH-adjusted across series when ``adjust``) is
    below ``warn_p`` and fails below ``fail_p``. For metrics, ``*_above``/``*_below`` bound the
    statistic. ``warn_share``/``fail_share`` override the fleet's shares for this check.
    ``option_values`` holds the statistic's options (``(name, value)`` pairs; ``None`` means the
    statistic's default rule); read them with :meth:`option` or :meth:`options`.
    """

    enabled: bool = True
    warn_p: float | None = None
    fail_p: float | None = None
    warn_above: float | None = None
    fail_above: float | None = None
    warn_below: float | None = None
    fail_below: float | None = None
    adjust: bool = True
    warn_share: float | None = None
    fail_share: float | None = None
    fleet_warn_p: float | None = None
    fleet_fail_p: float | None = None
    option_values: tuple[tuple[str, Any], ...] = ()

    def option(self, name: str) -> Any:
        """The value of option ``name`` (``None``: the statistic's default rule)."""
        return dict(self.option_values).get(name)

    def options(self) -> dict[str, Any]:
        """The options that are set."""
        return {k: v for k, v in self.option_values if v is not None}


@dataclass(frozen=True, eq=False)
class CheckInputs:
    """What a check's runner reads: the batch and its residuals (computed once per run)."""

    batch: SeriesBatch
    residuals: Residuals


@dataclass(frozen=True, eq=False)
class Finding:
    """A warn or fail of check ``result`` on series ``i``, for its reason sentence."""

    result: CheckResult
    i: int
    code: int
    p_adjusted: np.ndarray

    @property
    def statistic(self) -> float:
        return float(self.result.statistic[self.i])

    def detail(self, key: str) -> Any:
        return self.result.details[key][self.i]

    def p_text(self) -> str:
        """``p = 0.0012, adjusted across series 0.024`` (the raw p-value alone when the check's
        p-values were not adjusted)."""
        raw = float(self.result.p_value[self.i])
        adj = float(self.p_adjusted[self.i])
        if math.isnan(adj):
            return f"p = {fmt(raw, 2)}"
        return f"p = {fmt(raw, 2)}, adjusted across series {fmt(adj, 2)}"


def fmt(x: float | None, digits: int = 3) -> str:
    """A number for a sentence: ``digits`` significant digits, ``n/a`` for a missing value."""
    if x is None or (isinstance(x, float) and math.isnan(x)):
        return "n/a"
    if isinstance(x, float) and math.isinf(x):
        return "inf" if x > 0 else "-inf"
    return f"{x:.{digits}g}"


@dataclass(frozen=True)
class SeriesSection:
    """A section of each series' result row built from checks' columns (the ``bias`` object).

    ``fields`` are ``(key, check, column)`` with ``column`` ``"statistic"`` or a detail key;
    the section is ``None`` for every series when its owner (the declaring check) did not run,
    and a field is ``None`` when its check did not run.
    """

    key: str
    fields: tuple[tuple[str, str, str], ...]


@dataclass(frozen=True)
class FleetFinding:
    """A fleet-level test of one check: the record written to the result (with a
    ``to_dict()``), its p-value, whether the effect is large enough to matter (the check's
    ``material`` rule at the fleet level), the sentence for a warn or fail, and the status
    the gate gave it (``code``, set by the gate from the owner's ``fleet_warn_p`` and
    ``fleet_fail_p``, within the fleet's family of tests)."""

    result: Any
    p_value: float = float("nan")
    material: bool = True
    message: str = ""
    warn_p: float | None = None
    """The warn threshold (before the family's division): the owner's ``fleet_warn_p``, or
    what ``compute`` found in the policy instead."""
    code: int = PASS
    warn_p_value: float | None = None
    """The p-value the warn threshold is compared with, where it is another test's than
    ``p_value``'s (the baseline comparison fails beyond a margin and warns at any loss);
    ``None``: ``p_value``."""


@dataclass(frozen=True)
class FleetTest:
    """A fleet-level test declared by a check (the fleet bias), written to the result's
    ``fleet[key]``, in two steps (:mod:`service.core.fleet_parts`): ``gather(checks, weights,
    policy)`` reads one block of series (their checks, residuals and batch rows, and their
    weights) into a :class:`~service.core.fleet_parts.FleetPart`; ``finish(part, checks,
    weights, policy)`` makes the finding from the parts of every block combined, with the
    fleet's per-series check results and weights (``checks.batch`` and ``checks.residuals``
    may hold no observations there). ``empty`` stands in when the check did not run."""

    key: str
    gather: Callable[[BatchChecks, np.ndarray, Policy], FleetPart]
    finish: Callable[[FleetPart, BatchChecks, np.ndarray, Policy], FleetFinding]
    empty: FleetFinding
    min_series: int = 10
    """Fewest series the owner must have tested for the fleet-level test to run (and to count
    in the fleet's families): below it the series' own tests are all the evidence there is."""

    def gather_blocks(
        self, checks: BatchChecks, weights: np.ndarray, policy: Policy
    ) -> list[FleetPart]:
        """The part of every block of :data:`~service.core.fleet_parts.BLOCK` series of
        ``checks``, in order (combine them with :func:`~service.core.fleet_parts.combine`)."""
        n = checks.batch.n_series
        if n <= fleet_parts.BLOCK:
            return [self.gather(checks, weights, policy)]
        return [
            self.gather(
                checks.rows(slice(lo, lo + fleet_parts.BLOCK)),
                weights[lo : lo + fleet_parts.BLOCK],
                policy,
            )
            for lo in range(0, n, fleet_parts.BLOCK)
        ]

    def compute(self, checks: BatchChecks, weights: np.ndarray, policy: Policy) -> FleetFinding:
        """The finding over one whole batch's checks and weights."""
        parts = self.gather_blocks(checks, weights, policy)
        return self.finish(combine(parts), checks, weights, policy)


Runner = Callable[..., CheckResult]
SentenceFn = Callable[[Finding], str]
CapFn = Callable[[CheckResult, np.ndarray], np.ndarray]
MaterialFn = Callable[[CheckResult, "CheckPolicy"], np.ndarray]
NotesFn = Callable[[CheckResult, np.ndarray, np.ndarray, np.ndarray], Mapping[int, str]]


@dataclass(frozen=True)
class CheckDef:
    """One check, declared once.

    Attributes
    ----------
    name, title : str
        The API name (``ljung_box``) and the name in words.
    kind : {"test", "metric"}
        Tests are judged by their p-value, metrics by their statistic against thresholds.
    position : int
        Catalogue order (results list checks in this order).
    family, needs_holdout, tests, null_hypothesis, defaults, details, source : str
        The catalogue's description.
    run : callable
        ``run(inputs, **options) -> CheckResult`` over a :class:`CheckInputs`.
    rule : CheckPolicy
        The default policy's rule for this check.
    passed : str
        The sentence for a series that passes.
    found : callable
        ``found(finding) -> str``: what a warn or fail found, with its numbers.
    meaning : str
        What a warn or fail means and what to do (ends every reason sentence of the check).
    options : tuple of Option
        The statistic's options (policy fields unless ``in_policy=False``).
    thresholds : tuple of str
        For metrics, which of ``warn_above``, ``fail_above``, ``warn_below``, ``fail_below``
        apply (tests always take ``warn_p``, ``fail_p`` and ``adjust``).
    cap : callable, optional
        ``cap(result, codes) -> codes``: a rule that lowers some statuses (intervals that are
        too wide only warn).
    section : SeriesSection, optional
        A section of the series rows this check owns.
    fleet : FleetTest, optional
        A fleet-level test this check owns.
    essential : bool
        The property the check tests is essential (a zero mean, no autocorrelation): a series
        it could not test is at best ``warn``, and a fleet it tested none of fails.
    material : callable, optional
        ``material(result, check_policy) -> bool per series``: whether an effect is large
        enough to matter (bias of at least ``min_sd`` residual standard deviations or
        ``min_percent`` of the level). A significant but immaterial effect passes.
    pass_notes : callable, optional
        ``pass_notes(result, p_adjusted, codes, immaterial) -> {series: sentence}``: the pass
        sentence of some passing series, where the default would not say what their numbers
        show (``immaterial``: significant effects that the ``material`` rule let pass).
    hint : callable, optional
        ``hint(result) -> {series: sentence}``: a note added to the reasons of every residual
        check of those series (the first residuals look like a model's burn-in).
    applies : callable, optional
        ``applies(batch) -> bool``: whether the check belongs to this batch at all (the
        baseline comparison, only when a baseline was given). Where it is false the check does
        not run and is left out of the result entirely: no summary, no series entry, no fleet
        statistic, no place in the fleet's families. ``None``: every batch.
    """

    name: str
    title: str
    kind: CheckKind
    position: int
    family: str
    needs_holdout: bool
    tests: str
    null_hypothesis: str
    defaults: str
    details: tuple[str, ...]
    source: str
    run: Runner
    rule: CheckPolicy
    passed: str
    found: SentenceFn
    meaning: str
    options: tuple[Option, ...] = ()
    thresholds: tuple[str, ...] = ()
    cap: CapFn | None = None
    section: SeriesSection | None = None
    fleet: FleetTest | None = None
    essential: bool = False
    material: MaterialFn | None = None
    pass_notes: NotesFn | None = None
    hint: Callable[[CheckResult], Mapping[int, str]] | None = None
    applies: Callable[[SeriesBatch], bool] | None = None
    option_names: frozenset[str] = field(init=False, default=frozenset())
    runner_options: frozenset[str] = field(init=False, default=frozenset())

    def __post_init__(self) -> None:
        object.__setattr__(self, "option_names", frozenset(o.name for o in self.options))
        runner = frozenset(o.name for o in self.options if o.for_runner)
        object.__setattr__(self, "runner_options", runner)

    @property
    def policy_fields(self) -> frozenset[str]:
        """The policy fields that apply to this check."""
        allowed = {"enabled", "warn_share", "fail_share"}
        allowed |= {o.name for o in self.options if o.in_policy}
        if self.kind == "test":
            allowed |= {*TEST_THRESHOLDS, "adjust"}
        if self.fleet is not None:
            allowed |= {"fleet_warn_p", "fleet_fail_p"}
        allowed |= set(self.thresholds)
        return frozenset(allowed)

    def applies_to(self, batch: SeriesBatch) -> bool:
        """Whether this check belongs to ``batch`` (see ``applies``)."""
        return self.applies is None or bool(self.applies(batch))

    def reason(self, finding: Finding) -> str:
        """The full reason sentence: what was found, then what it means."""
        return f"{self.found(finding)}; {self.meaning}."


@cache
def all_checks() -> tuple[CheckDef, ...]:
    """Every check declared in the modules of :mod:`service.core.checks`, by position."""
    from . import checks as package

    found: list[CheckDef] = []
    for info in sorted(pkgutil.iter_modules(package.__path__), key=lambda m: m.name):
        module = importlib.import_module(f"{package.__name__}.{info.name}")
        found.extend(getattr(module, "CHECKS", ()))
    names = [c.name for c in found]
    duplicate = {n for n in names if names.count(n) > 1}
    if duplicate:
        raise RuntimeError(f"checks declared twice: {sorted(duplicate)}")
    return tuple(sorted(found, key=lambda c: (c.position, c.name)))


@cache
def checks_by_name() -> Mapping[str, CheckDef]:
    """:func:`all_checks` keyed by name."""
    return {c.name: c for c in all_checks()}


def check_names() -> tuple[str, ...]:
    """The registered checks' names, in catalogue order."""
    return tuple(c.name for c in all_checks())
