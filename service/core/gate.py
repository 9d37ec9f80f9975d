"""The gate: from check results and a policy to per-series and fleet verdicts with reasons.

Steps, all vectorised over series:

1. Run the checks the policy enables (``run_checks``).
2. Per check, adjust the p-values across the series it tested with Benjamini-Hochberg (when the
   policy's ``fleet.adjustment`` is ``"bh"``), reported as ``p_adjusted``.
3. Per series and check, a status from the (adjusted) p-value or the metric's thresholds. With
   the policy's ``fleet.family`` at ``"bonferroni"`` (the default) the tests that can fail the
   fleet are one family: each is judged at ``fail_p / K`` with ``K`` the number of such tests
   (series checks and fleet-level tests) that ran; the warn thresholds likewise, in a family of
   their own. A check's ``material`` rule turns a significant but negligible effect into a
   pass. A series' verdict is its worst check; a series on which an essential check (bias,
   autocorrelation) could not run is at best ``warn``.
4. Per check over the fleet: tested, failed and warned counts and the weighted shares; the check
   fails the fleet when its failed share exceeds the fail share, warns when its warned-or-failed
   share exceeds the warn share; a critical series' fail fails it, a critical warn warns it. An
   essential check that tested no series fails the fleet, and warns it when the weight it could
   not test exceeds the warn share.
5. The fleet-level tests the checks declare (the fleet bias) are judged at their owner's
   ``fleet_warn_p`` and ``fleet_fail_p`` within the same families; the fleet verdict is the
   worst of the checks and those tests.

A verdict is statistical evidence under the stated assumptions, not a guarantee.
"""

from __future__ import annotations

from collections.abc import Callable, Iterator, Mapping, Sequence
from dataclasses import dataclass, replace
from functools import partial
from typing import Any

import numpy as np

# The result records hold the assessment's JSON shape, owned by service/results/ (no numpy).
from service.results import (
    AssessmentResult,
    CheckColumns,
    CheckSummary,
    FleetSummary,
    PolicyRef,
    Reason,
    SeriesColumns,
    SeriesTable,
    to_dicts,
)

from .batch import SeriesBatch, stack_batches, stack_key
from .fleet_parts import FleetPart
from .messages import fleet_message, not_tested_message, pass_message, untested_message
from .multiple import benjamini_hochberg_rows
from .policy import CheckPolicy, Policy
from .registry import (
    FAIL,
    PASS,
    SKIPPED,
    WARN,
    CheckDef,
    Finding,
    FleetFinding,
    all_checks,
    checks_by_name,
)
from .results import Status
from .runner import BatchChecks, run_checks
from .types import InputError

_STATUS = np.array(
    [Status.SKIPPED.value, Status.PASS.value, Status.WARN.value, Status.FAIL.value], dtype=object
)
_STATUS_ENUM = (Status.SKIPPED, Status.PASS, Status.WARN, Status.FAIL)
SHOWN = ("all", "flagged", "none")
"""Which series rows a result holds: every one, those not passing, or none."""


@dataclass(frozen=True, eq=False)
class Assessment:
    """The gate's full result over one batch: the decision with the arrays it was made from;
    :meth:`result` is its typed, JSON-shaped result."""

    verdict: Status
    policy: Policy
    results: BatchChecks
    weights: np.ndarray
    status_codes: Mapping[str, np.ndarray]
    p_adjusted: Mapping[str, np.ndarray]
    series_codes: np.ndarray
    summaries: tuple[CheckSummary, ...]
    reasons: tuple[Reason, ...]
    fleet: Mapping[str, FleetFinding]
    """The fleet-level statistics the checks declare, by key (``fleet["bias"]``)."""
    notes: Mapping[tuple[str, int], str]
    """The pass sentences of some passing series, by (check, series)."""

    @property
    def ids(self) -> tuple[str, ...]:
        return self.results.batch.ids

    def series_verdicts(self) -> list[str]:
        return _STATUS[np.maximum(self.series_codes, PASS)].tolist()

    def result(self, shown: str = "all") -> AssessmentResult:
        """The typed result (:class:`service.results.AssessmentResult`): verdict, policy,
        reasons, per-check summaries, fleet counts and statistics, and the series table
        (the rows ``shown`` asks for: ``"all"``, ``"flagged"`` or ``"none"``)."""
        if shown not in SHOWN:
            raise ValueError(f"shown: one of {', '.join(SHOWN)}")
        return _results(
            _Decided(
                [self], self.results, self.status_codes, self.p_adjusted, self.weights, self.notes
            ),
            [shown],
        )[0]

    def series_parts(self, size: int) -> Iterator[SeriesTable]:
        """Every series' row, as :meth:`result` gives them, in tables of ``size`` series
        (the last may be shorter), each built when it is asked for: a big fleet's rows are
        never all held as Python values at once."""
        if size < 1:
            raise ValueError("size must be at least 1")
        n = len(self.ids)
        # The pass sentences by row, in row order (arrays and references to the sentences,
        # not a second dictionary of every one), handed to each part with its positions.
        note_rows = np.fromiter(
            (row for _, row in self.notes), dtype=np.int64, count=len(self.notes)
        )
        note_keys = list(self.notes)
        order = np.argsort(note_rows, kind="stable")
        note_rows = note_rows[order]
        named = {r.series_id for r in self.reasons if r.series_id is not None}
        parts_of: dict[str, int] = {}
        if named:  # the rows of the named series, found by numpy (a fleet has millions of ids)
            ids = np.asarray(self.ids, dtype=object)
            at = np.flatnonzero(np.isin(ids, np.array(sorted(named), dtype=object)))
            parts_of = {self.ids[row]: row // size for row in at.tolist()}
        reasons: dict[int, list[Reason]] = {}
        for r in self.reasons:
            if r.series_id is not None:
                reasons.setdefault(parts_of[r.series_id], []).append(r)
        for k, lo in enumerate(range(0, n, size)):
            rows = slice(lo, min(lo + size, n))
            first, last = np.searchsorted(note_rows, [rows.start, rows.stop])
            notes = {
                (note_keys[j][0], note_keys[j][1] - lo): self.notes[note_keys[j]]
                for j in order[first:last].tolist()
            }
            part = replace(
                self,
                results=self.results.rows(rows),
                weights=self.weights[rows],
                status_codes={name: c[rows] for name, c in self.status_codes.items()},
                p_adjusted={name: p[rows] for name, p in self.p_adjusted.items()},
                series_codes=self.series_codes[rows],
                reasons=tuple(reasons.get(k, ())),
                notes=notes,
            )
            yield part.result().series

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready result (plain Python values; NaN and infinities become ``None``):
        ``self.result().to_dict()``."""
        return self.result().to_dict()


def _weights(batch: SeriesBatch, policy: Policy) -> np.ndarray:
    """The series' weights under the policy's weighting (the batch holds the given weights,
    and the volume where none was given)."""
    weighting = policy.fleet.weighting
    if weighting in ("volume", "count") and batch.weights_given.any():
        raise WeightsNotUsed(weighting, int(np.argmax(batch.weights_given)))
    if weighting == "count":
        return np.ones(batch.n_series)
    return np.asarray(batch.weights, dtype=float)


class WeightsNotUsed(InputError):
    """Weights were given to a policy whose weighting ignores them: refused rather than
    silently dropped. ``index`` is the first series with a given weight."""

    def __init__(self, weighting: str, index: int) -> None:
        self.weighting = weighting
        super().__init__(
            "weights",
            f"the policy weighs series by {weighting!r} (fleet.weighting), which ignores given "
            "weights: leave the weights out, or use a policy with weighting 'auto' or 'given'",
            index=index,
        )


def _codes(
    results: BatchChecks,
    names: list[str],
    cps: list[CheckPolicy],
    policy: Policy,
    part_size: int,
) -> tuple[np.ndarray, np.ndarray, tuple[np.ndarray, np.ndarray], np.ndarray, np.ndarray]:
    """Status codes, BH-adjusted p-values, the fail and warn family sizes per part, which
    significant effects were immaterial, and the bounds used per (check, part), one row
    per check in ``names`` (in that order), the adjustment made within each run of
    ``part_size`` series (one part's).

    Tests: the (adjusted, where the policy says so) p-value against ``fail_p / K_fail`` and
    ``warn_p / K_warn`` (module docstring, step 3), a significant but immaterial effect passing;
    metrics: the statistic against their bounds. Skipped series get ``SKIPPED``; the adjusted
    p-values of metrics are ``NaN``."""
    checks = [results[name] for name in names]
    n = results.batch.n_series
    shape = (len(checks), n)
    n_parts = n // part_size if part_size else 0
    is_test = np.array([r.kind == "test" for r in checks], dtype=bool)
    skipped = np.array([r.skipped for r in checks]).reshape(shape)
    values = np.array(
        [r.p_value if t else r.statistic for r, t in zip(checks, is_test, strict=True)]
    ).reshape(shape)
    # Metric rows enter the adjustment as all missing, so their adjusted p-values are NaN.
    p_in = np.where(skipped | ~is_test[:, None], np.nan, values)
    if part_size == shape[1]:
        p_adj = benjamini_hochberg_rows(p_in)
    elif part_size == 1:
        p_adj = p_in  # one p-value adjusted on its own is itself
    else:
        p_adj = benjamini_hochberg_rows(p_in.reshape(-1, part_size)).reshape(shape)
    del p_in  # (check, series) arrays are large for a big fleet: each freed when done
    adjust = policy.fleet.adjustment == "bh"
    use_adj = np.array(
        [adjust and t and cp.adjust for cp, t in zip(cps, is_test, strict=True)], dtype=bool
    )[:, None]
    v = np.where(use_adj, p_adj, values)
    del values
    k_fail, k_warn = _family_sizes(names, cps, is_test, skipped, policy, part_size)
    # Per (check, part): fail below, fail above, warn below, warn above (a test's p-value has
    # only the "below" bounds, divided by its family's size); a bound that does not apply is
    # NaN, which no comparison passes.
    bounds = np.empty((len(checks), n_parts, 4))
    for j, (cp, t) in enumerate(zip(cps, is_test, strict=True)):
        if t:
            fail_p = np.nan if cp.fail_p is None else cp.fail_p
            warn_p = np.nan if cp.warn_p is None else cp.warn_p
            bounds[j] = np.stack(
                [
                    fail_p / k_fail,
                    np.full(n_parts, np.nan),
                    warn_p / k_warn,
                    np.full(n_parts, np.nan),
                ],
                axis=-1,
            )
        else:
            bounds[j] = np.array(
                [cp.fail_below, cp.fail_above, cp.warn_below, cp.warn_above], dtype=float
            )
    # Compared part by part, each part's bounds broadcast over its series (no copy per series).
    cube = v.reshape(len(checks), n_parts, part_size if n_parts else 0)
    lo_fail, hi_fail, lo_warn, hi_warn = (bounds[:, :, None, j] for j in range(4))
    codes = np.where(
        (cube < lo_fail) | (cube > hi_fail),
        FAIL,
        np.where((cube < lo_warn) | (cube > hi_warn), WARN, PASS),
    ).reshape(shape)
    del cube
    immaterial = np.zeros(shape, dtype=bool)
    for j, (name, cp) in enumerate(zip(names, cps, strict=True)):
        check = checks_by_name()[name]
        if check.material is not None:
            small = ~check.material(checks[j], cp) & (codes[j] >= WARN)
            immaterial[j] = small
            codes[j] = np.where(small, PASS, codes[j])
        if check.cap is not None:
            codes[j] = check.cap(checks[j], codes[j])
    return np.where(skipped, SKIPPED, codes), p_adj, (k_fail, k_warn), immaterial, bounds


def _family_sizes(
    names: list[str],
    cps: list[CheckPolicy],
    is_test: np.ndarray,
    skipped: np.ndarray,
    policy: Policy,
    part_size: int,
) -> tuple[np.ndarray, np.ndarray]:
    """Per part: how many tests can fail the fleet (``K_fail``) and how many can warn it
    (``K_warn``): the series tests with the threshold set that tested at least one of the
    part's series, and the fleet-level tests with theirs set whose owner did. Both are 1 with
    ``fleet.family = "none"`` (and at least 1)."""
    n_parts = skipped.shape[1] // part_size if part_size else 0
    if policy.fleet.family == "none" or not n_parts:
        return np.ones(n_parts), np.ones(n_parts)
    tested_n = (~skipped).reshape(len(names), n_parts, part_size).sum(axis=-1)
    ran = tested_n > 0
    k_fail = np.zeros(n_parts)
    k_warn = np.zeros(n_parts)
    for j, (name, cp, t) in enumerate(zip(names, cps, is_test, strict=True)):
        if t and cp.fail_p is not None:
            k_fail += ran[j]
        if t and (cp.warn_p is not None or cp.fail_p is not None):
            k_warn += ran[j]
        fleet_test = checks_by_name()[name].fleet
        if fleet_test is not None:
            enough = tested_n[j] >= fleet_test.min_series
            k_fail += enough * (cp.fleet_fail_p is not None)
            k_warn += enough * (cp.fleet_warn_p is not None or cp.fleet_fail_p is not None)
    return np.maximum(k_fail, 1), np.maximum(k_warn, 1)


def _shares(weights: np.ndarray, hit: np.ndarray, tested: np.ndarray) -> np.ndarray:
    """Per check (and part): the weighted share of the tested series that are ``hit``, over
    the last axis; by count when the tested series weigh nothing, 0 when none was tested."""
    total = np.where(tested, weights, 0.0).sum(axis=-1)
    hit_weight = np.where(hit & tested, weights, 0.0).sum(axis=-1)
    n = tested.sum(axis=-1)
    n_hit = (hit & tested).sum(axis=-1)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(
            total > 0, hit_weight / total, np.where(n > 0, n_hit / np.maximum(n, 1), 0.0)
        )


def _plan(
    policy: Policy,
) -> tuple[dict[str, CheckPolicy], tuple[str, ...], dict[str, dict[str, Any]]]:
    """The policy's settings per check, the checks it enables and their options."""
    cps_all = {c.name: policy.check(c.name) for c in all_checks()}
    enabled = tuple(name for name, cp in cps_all.items() if cp.enabled)
    options = {}
    for name in enabled:
        accepted = checks_by_name()[name].runner_options
        options[name] = {k: v for k, v in cps_all[name].options().items() if k in accepted}
    return cps_all, enabled, options


def assess(batch: SeriesBatch, policy: Policy) -> Assessment:
    """Run the policy's checks over ``batch`` and decide."""
    cps_all, enabled, options = _plan(policy)
    return _decide(run_checks(batch, options, only=enabled), policy, cps_all)


def assess_many(items: Sequence[tuple[SeriesBatch, Policy]]) -> list[Assessment]:
    """``[assess(batch, policy) for batch, policy in items]``, with the checks of every batch
    that shares a policy (the same object) and a :func:`stack_key` (shape and missing values)
    run in one vectorised pass.

    Each check works row by row, so the results are those of separate calls, to the last bit;
    the decision (adjustment across series, shares, reasons) is still made per batch, on its
    own series. This is how the service answers many small concurrent submissions at once.
    """
    out: list[Assessment | None] = [None] * len(items)
    for members, decided in _decided_groups(items):
        for i, assessment in zip(members, decided.assessments, strict=True):
            out[i] = assessment
    return out  # type: ignore[return-value]


def assess_many_results(
    items: Sequence[tuple[SeriesBatch, Policy]], shown: Sequence[str] | None = None
) -> list[AssessmentResult]:
    """``[assess(batch, policy).result() for batch, policy in items]``, as
    :func:`assess_many` groups them, with each group's series columns built at once.

    ``shown`` (one per item; all ``"all"`` unless given) says which series rows each result
    holds: ``"all"``, ``"flagged"`` (those not passing) or ``"none"``; the rows left out are
    never built. The verdict, reasons, check summaries and fleet counts are the same."""
    views = list(shown) if shown is not None else ["all"] * len(items)
    if len(views) != len(items) or not set(views) <= set(SHOWN):
        raise ValueError(f"shown: one of {', '.join(SHOWN)} per item")
    out: list[AssessmentResult | None] = [None] * len(items)
    for members, decided in _decided_groups(items):
        results = _results(decided, [views[i] for i in members])
        for i, result in zip(members, results, strict=True):
            out[i] = result
    return out  # type: ignore[return-value]


def assess_many_dicts(items: Sequence[tuple[SeriesBatch, Policy]]) -> list[dict[str, Any]]:
    """``[assess(batch, policy).to_dict() for batch, policy in items]``, as
    :func:`assess_many` groups them, with each group's series columns built at once."""
    return to_dicts(assess_many_results(items))


def _decided_groups(
    items: Sequence[tuple[SeriesBatch, Policy]],
) -> Iterator[tuple[list[int], _Decided]]:
    """The groups of :func:`assess_many`: the positions in ``items`` of each and its decision."""
    groups: dict[tuple[object, ...], list[int]] = {}
    for i, (batch, policy) in enumerate(items):
        key = (id(policy), *stack_key(batch)) if len(items) > 1 else ()
        groups.setdefault(key, []).append(i)
    for members in groups.values():
        policy = items[members[0]][1]
        parts = [items[i][0] for i in members]
        cps_all, enabled, options = _plan(policy)
        checked = run_checks(stack_batches(parts), options, only=enabled)
        yield members, _decide_parts(checked, parts, policy, cps_all)


def _decide(results: BatchChecks, policy: Policy, cps_all: Mapping[str, CheckPolicy]) -> Assessment:
    """Steps 2 to 5 of the module docstring over checks already run."""
    return _decide_parts(results, [results.batch], policy, cps_all).assessments[0]


@dataclass(frozen=True, eq=False)
class _Decided:
    """The assessments of stacked parts, and the stacked tables their results are read from."""

    assessments: list[Assessment]
    checks: BatchChecks
    status_codes: Mapping[str, np.ndarray]
    p_adjusted: Mapping[str, np.ndarray]
    weights: np.ndarray
    notes: Mapping[tuple[str, int], str]
    """The pass sentences of some passing series, by (check, stacked row)."""


def _decide_parts(
    stacked: BatchChecks,
    parts: Sequence[SeriesBatch],
    policy: Policy,
    cps_all: Mapping[str, CheckPolicy],
    fleet_parts: Mapping[str, FleetPart] | None = None,
) -> _Decided:
    """:func:`_decide` for each of ``parts`` (batches of one size, stacked in ``stacked``),
    vectorised over the parts: every per-series quantity is computed once over the stacked
    rows and every per-part reduction runs along the last axis of a (check, part, series)
    array, so each part gets the numbers it would get alone. ``fleet_parts`` (one part only):
    the fleet-level tests' parts, by key, already gathered block by block (a chunked
    assessment's), instead of gathering them from ``stacked``."""
    batch = stacked.batch
    n_parts = len(parts)
    size = parts[0].n_series if parts else 0
    if any(part.n_series != size for part in parts) or n_parts * size != batch.n_series:
        raise ValueError("_decide_parts: the parts must be of one size and make up the batch")
    weights = _weights(batch, policy)
    if policy.fleet.critical_series:
        critical = np.isin(np.array(batch.ids, dtype=object), list(policy.fleet.critical_series))
    else:
        critical = np.zeros(batch.n_series, dtype=bool)

    fleet_policy = policy.fleet
    defs = [c for c in all_checks() if c.name in stacked.checks]
    names = [c.name for c in defs]
    cps = [cps_all[name] for name in names]
    if names:
        matrix, p_matrix, (k_fail, k_warn), immaterial, bounds = _codes(
            stacked, names, cps, policy, size
        )
    else:
        matrix = np.zeros((0, batch.n_series), dtype=int)
        p_matrix = np.zeros((0, batch.n_series))
        immaterial = np.zeros((0, batch.n_series), dtype=bool)
        bounds = np.zeros((0, n_parts, 4))
        k_fail = k_warn = np.ones(n_parts)
    # (check, part, series within the part): reductions over the last axis are per part.
    cube = matrix.reshape(len(names), n_parts, size)
    w_parts = weights.reshape(n_parts, size)
    tested = cube != SKIPPED
    failed, warned = cube == FAIL, cube == WARN
    failed_share = _shares(w_parts, failed, tested)
    warned_share = _shares(w_parts, warned, tested)
    everyone = np.ones_like(tested)
    untested_share = _shares(w_parts, ~tested, everyone)
    fail_share = np.array(
        [fleet_policy.fail_share if cp.fail_share is None else cp.fail_share for cp in cps],
        dtype=float,
    )[:, None]
    warn_share = np.array(
        [fleet_policy.warn_share if cp.warn_share is None else cp.warn_share for cp in cps],
        dtype=float,
    )[:, None]
    essential = np.array([c.essential for c in defs], dtype=bool)[:, None]
    crit_parts = critical.reshape(n_parts, size)
    crit_warned = (crit_parts & warned).any(axis=-1)
    crit_failed = (crit_parts & failed).any(axis=-1)
    status = np.where(tested.any(axis=-1), PASS, SKIPPED)
    status = np.where((failed_share + warned_share > warn_share) | crit_warned, WARN, status)
    status = np.where((failed_share > fail_share) | crit_failed, FAIL, status)
    # Fail closed: an essential check that could not test enough of the fleet.
    closed_warn = essential & (untested_share > warn_share)
    closed_fail = essential & ~tested.any(axis=-1) & (size > 0)
    status = np.where(closed_warn & (status < WARN), WARN, status)
    status = np.where(closed_fail, FAIL, status)
    # Per part (columns), per check (rows): plain Python values, converted once.
    columns = [
        a.T.tolist()
        for a in (
            status,
            tested.sum(axis=-1),
            failed.sum(axis=-1),
            warned.sum(axis=-1),
            failed_share,
            warned_share,
            np.broadcast_to(fail_share, status.shape),
            np.broadcast_to(warn_share, status.shape),
            crit_warned | crit_failed,
            untested_share,
            np.broadcast_to(closed_warn | closed_fail, status.shape),
        )
    ]
    # Series reasons of every part at once: (check, part, series) of each warn or fail, and of
    # each essential check that could not run.
    hits: list[list[tuple[int, int, int]]] = [[] for _ in range(n_parts)]
    for j, g, i in zip(*(ix.tolist() for ix in np.nonzero(cube >= WARN)), strict=True):
        hits[g].append((j, i, int(cube[j, g, i])))
    unchecked: list[list[tuple[int, int]]] = [[] for _ in range(n_parts)]
    for j, g, i in zip(
        *(ix.tolist() for ix in np.nonzero(essential[:, :, None] & ~tested)), strict=True
    ):
        unchecked[g].append((j, i))
    series_codes_all = matrix.max(axis=0) if names else np.zeros(batch.n_series, dtype=int)
    if names:
        not_run = (essential & (matrix == SKIPPED)).any(axis=0)
        series_codes_all = np.where(not_run, np.maximum(series_codes_all, WARN), series_codes_all)
    hints = _hints(defs, stacked)
    lag_row = names.index("ljung_box") if "ljung_box" in names else None
    # Sentences for series rows: made when a row is shown (an answer without rows never).
    notes = _LazyNotes(partial(_pass_notes, defs, stacked, matrix, p_matrix, immaterial))
    split = stacked.split(parts) if n_parts > 1 else [stacked]
    out = []
    for g, (part, results) in enumerate(zip(parts, split, strict=True)):
        rows = slice(g * size, (g + 1) * size)
        part_weights = weights[rows]
        summaries: list[CheckSummary] = []
        fleet_reasons: list[tuple[int, Reason]] = []
        series_reasons: list[tuple[int, float, int, Reason]] = []
        for name, (
            st,
            n_tested,
            n_failed,
            n_warned,
            f_share,
            w_share,
            f_limit,
            w_limit,
            crit,
            u_share,
            closed,
        ), used in zip(
            names, zip(*(col[g] for col in columns), strict=True), bounds[:, g], strict=True
        ):
            if closed:
                message = untested_message(name, st, size - n_tested, size, u_share)
            else:
                message = fleet_message(
                    name, st, n_failed, n_warned, n_tested, f_share, w_share, f_limit, w_limit, crit
                )
            summary = CheckSummary(
                name=name,
                status=_STATUS_ENUM[st],
                series_tested=n_tested,
                series_failed=n_failed,
                series_warned=n_warned,
                series_skipped=size - n_tested,
                failed_share=f_share,
                warned_share=w_share,
                message=message,
                **_used(checks_by_name()[name].kind, used),
            )
            summaries.append(summary)
            if st >= WARN:
                fleet_reasons.append((st, Reason(name, summary.status, None, summary.message)))
        for j, i, c in hits[g]:
            check = defs[j]
            text = check.reason(Finding(stacked[check.name], rows.start + i, c, p_matrix[j]))
            note = None if check.needs_holdout else hints.get(rows.start + i)
            if note:
                text = f"{text[:-1]}; {note}."
            if (
                check.name in _MEAN_TESTS
                and lag_row is not None
                and matrix[lag_row, rows.start + i] >= WARN
            ):
                text = f"{text[:-1]}; {_AUTOCORRELATED_TOO}."
            reason = Reason(check.name, _STATUS_ENUM[c], part.ids[i], text)
            series_reasons.append((c, -float(part_weights[i]), i, reason))
        for j, i in unchecked[g]:
            check = defs[j]
            why = stacked[check.name].skip_reason[rows.start + i]
            reason = Reason(check.name, Status.WARN, part.ids[i], not_tested_message(check, why))
            series_reasons.append((WARN, -float(part_weights[i]), i, reason))
        codes = dict(zip(names, matrix[:, rows], strict=True))
        p_adjusted = dict(zip(names, p_matrix[:, rows], strict=True))
        # Codes order as severities: fail > warn > pass > skipped.
        fleet_code = max(int(status[:, g].max(initial=PASS)), PASS)
        findings = _fleet_findings(results, part_weights, policy, k_fail[g], k_warn[g], fleet_parts)
        for name, finding in findings.values():
            if finding.code >= WARN:
                fleet_code = max(fleet_code, finding.code)
                level = _STATUS_ENUM[finding.code]
                fleet_reasons.append((finding.code, Reason(name, level, None, finding.message)))
        fleet_reasons.sort(key=lambda r: -r[0])
        series_reasons.sort(key=lambda r: (-r[0], r[1], r[2]))
        ordered: list[Reason] = []
        for severity in (FAIL, WARN):
            ordered += [r for s, r in fleet_reasons if s == severity]
            ordered += [r[3] for r in series_reasons if r[0] == severity]
        out.append(
            Assessment(
                verdict=Status(_STATUS[fleet_code]),
                policy=policy,
                results=results,
                weights=part_weights,
                status_codes=codes,
                p_adjusted=p_adjusted,
                series_codes=series_codes_all[rows],
                summaries=tuple(summaries),
                reasons=tuple(ordered),
                fleet={key: finding for key, (_, finding) in findings.items()},
                # One part: its rows are the stacked rows (no copy of every sentence).
                notes=notes if n_parts == 1 else _LazyNotes(partial(_part_notes, notes, rows)),
            )
        )
    return _Decided(
        out,
        stacked,
        dict(zip(names, matrix, strict=True)),
        dict(zip(names, p_matrix, strict=True)),
        weights,
        notes,
    )


_MEAN_TESTS = frozenset({"bias", "tracking_signal"})
"""Checks that test a series' mean error with a variance that allows for short-range
autocorrelation only (HAC bandwidths of a few periods)."""

_AUTOCORRELATED_TOO = (
    "this series' residuals are also autocorrelated, and a test of the mean allows for short-range "
    "autocorrelation only, so with structure at longer (e.g. seasonal) lags the evidence of "
    "bias can be overstated: remove the autocorrelation first, then look at the bias again"
)
"""Added to a bias or tracking-signal reason of a series whose autocorrelation check warns or
fails (the service-conditions study: zero-mean residuals with a seasonal AR 0.5 term at lag 7,
T = 60, reject the bias test 7% of the time at 1%)."""


def _used(kind: str, bounds: np.ndarray) -> dict[str, float | None]:
    """The p-value thresholds a test's series were judged by (``None`` when not set)."""
    if kind != "test":
        return {"fail_p_used": None, "warn_p_used": None}
    fail, warn = float(bounds[0]), float(bounds[2])
    return {
        "fail_p_used": fail if np.isfinite(fail) else None,
        "warn_p_used": warn if np.isfinite(warn) else None,
    }


def _hints(defs: Sequence[CheckDef], checks: BatchChecks) -> dict[int, str]:
    """Per stacked row: the notes checks add to the reasons of that series' residual checks."""
    out: dict[int, str] = {}
    for check in defs:
        if check.hint is not None:
            for i, text in check.hint(checks[check.name]).items():
                out[i] = f"{out[i]}; {text}" if i in out else text
    return out


class _LazyNotes(Mapping[tuple[str, int], str]):
    """A mapping made by ``make()`` the first time it is read."""

    def __init__(self, make: Callable[[], Mapping[tuple[str, int], str]]) -> None:
        self._make: Callable[[], Mapping[tuple[str, int], str]] | None = make
        self._found: Mapping[tuple[str, int], str] = {}

    def _notes(self) -> Mapping[tuple[str, int], str]:
        if self._make is not None:
            self._found, self._make = self._make(), None
        return self._found

    def __getitem__(self, key: tuple[str, int]) -> str:
        return self._notes()[key]

    def __iter__(self) -> Iterator[tuple[str, int]]:
        return iter(self._notes())

    def __len__(self) -> int:
        return len(self._notes())


def _part_notes(notes: Mapping[tuple[str, int], str], rows: slice) -> dict[tuple[str, int], str]:
    """The notes of the stacked rows ``rows``, by row within them."""
    return {
        (name, i - rows.start): text
        for (name, i), text in notes.items()
        if rows.start <= i < rows.stop
    }


def _pass_notes(
    defs: Sequence[CheckDef],
    checks: BatchChecks,
    matrix: np.ndarray,
    p_matrix: np.ndarray,
    immaterial: np.ndarray,
) -> dict[tuple[str, int], str]:
    """``(check, stacked row) -> sentence`` for passing series whose pass sentence is the
    check's own (``pass_notes``), not the default."""
    out: dict[tuple[str, int], str] = {}
    for j, check in enumerate(defs):
        if check.pass_notes is not None:
            found = check.pass_notes(checks[check.name], p_matrix[j], matrix[j], immaterial[j])
            out.update(((check.name, i), text) for i, text in found.items())
    return out


def _fleet_findings(
    results: BatchChecks,
    weights: np.ndarray,
    policy: Policy,
    k_fail: float,
    k_warn: float,
    parts: Mapping[str, FleetPart] | None = None,
) -> dict[str, tuple[str, FleetFinding]]:
    """Every fleet-level test the registered checks declare, by key, with the name of the
    check that declares it: computed when that check ran (else its empty value) and judged at
    the owner's ``fleet_fail_p / K_fail`` and ``fleet_warn_p / K_warn``, when material."""
    out = {}
    for check in all_checks():
        if check.fleet is None:
            continue
        test = check.fleet
        if not check.applies_to(results.batch):
            continue  # not part of this batch's result at all
        if check.name not in results.checks:
            out[test.key] = (check.name, test.empty)
            continue
        if int((~results[check.name].skipped).sum()) < test.min_series:
            out[test.key] = (check.name, test.empty)
            continue
        if parts is None:
            finding = test.compute(results, weights, policy)
        else:
            finding = test.finish(parts[test.key], results, weights, policy)
        cp = policy.check(check.name)
        p = finding.p_value
        p_warn = p if finding.warn_p_value is None else finding.warn_p_value
        code = PASS
        if finding.material and np.isfinite(p):
            if cp.fleet_fail_p is not None and p < cp.fleet_fail_p / k_fail:
                code = FAIL
            elif finding.warn_p is not None and p_warn < finding.warn_p / k_warn:
                code = WARN
        out[test.key] = (check.name, replace(finding, code=code))
    return out


# ------------------------------------------------------------------------------ serialisation


def _columns(arrays: list[np.ndarray]) -> list[list[Any]]:
    """Equal-length float arrays as lists of plain Python floats, non-finite as ``None``."""
    stacked = np.array(arrays, dtype=float)
    out = stacked.astype(object)
    out[~np.isfinite(stacked)] = None
    return out.tolist()


def _results(d: _Decided, shown: Sequence[str] | None = None) -> list[AssessmentResult]:
    """The typed result of each assessment in ``d``, their series columns built at once over
    the stacked tables (per check, the list of its per-series entries; a part's series are a
    run of rows) and handed to each part's :class:`SeriesTable`. ``shown`` (per assessment,
    as :func:`assess_many_results` takes it) keeps only some rows: the others are never
    converted, given a sentence or made into a row."""
    results = d.checks
    n = results.batch.n_series
    size = n // len(d.assessments) if d.assessments else 0
    views = list(shown) if shown is not None else ["all"] * len(d.assessments)
    codes = [a.series_codes for a in d.assessments]
    # The stacked rows kept, part by part; None: all of them.
    keep: np.ndarray | None = None
    counts = [size] * len(d.assessments)
    if any(v != "all" for v in views):
        picked = []
        for g, (view, c) in enumerate(zip(views, codes, strict=True)):
            rows = np.arange(g * size, (g + 1) * size)
            if view == "flagged":
                rows = rows[c > PASS]
            elif view == "none":
                rows = rows[:0]
            picked.append(rows)
            counts[g] = rows.size
        keep = np.concatenate(picked) if picked else np.zeros(0, dtype=np.intp)

    def kept(values: np.ndarray) -> np.ndarray:
        return values if keep is None else values[keep]

    m = n if keep is None else keep.size
    # Every float column of every check converted in one go, the others one by one.
    float_keys: list[tuple[str, str]] = []
    float_arrays: list[np.ndarray] = []
    columns: dict[str, dict[str, list[Any]]] = {}
    for name, res in results.checks.items():
        col: dict[str, list[Any]] = {
            "status": _STATUS[kept(d.status_codes[name])].tolist(),
            "skip": kept(res.skip_reason).tolist(),
        }
        for key, values in (
            ("statistic", res.statistic),
            ("p_value", res.p_value),
            ("p_adjusted", d.p_adjusted[name]),
            *((f"d:{k}", v) for k, v in res.details.items()),
        ):
            if values.dtype.kind == "f":
                float_keys.append((name, key))
                float_arrays.append(kept(values))
            else:
                col[key] = kept(values).tolist()
        columns[name] = col
    float_arrays.append(kept(d.weights))
    converted = _columns(float_arrays)
    weights = converted.pop()
    for (name, key), floats in zip(float_keys, converted, strict=True):
        columns[name][key] = floats
    # Sentences by (check, stacked row), then by position among the rows kept.
    messages: dict[tuple[str, int], str] = dict(d.notes) if m else {}
    for g, a in enumerate(d.assessments):
        if views[g] == "none":
            continue
        index_of = {sid: g * size + i for i, sid in enumerate(a.ids)}
        for r in a.reasons:
            if r.series_id is not None:
                messages[(r.check, index_of[r.series_id])] = r.message
    if keep is not None:
        position = {int(row): k for k, row in enumerate(keep.tolist())}
        messages = {
            (name, position[i]): text for (name, i), text in messages.items() if i in position
        }
    all_codes = np.concatenate(codes) if codes else np.zeros(0, dtype=int)
    verdicts = _STATUS[np.maximum(kept(all_codes), PASS)].tolist()
    for name in results.checks:
        col = columns[name]
        passed = pass_message(name)
        col["message"] = [
            skip
            if status == "skipped"
            else messages.get((name, i), passed if status == "pass" else "")
            for i, (status, skip) in enumerate(zip(col["status"], col["skip"], strict=True))
        ]
    sections = {
        check.section.key: _section_columns(check.name, check.section.fields, columns, m)
        for check in all_checks()
        if check.section is not None
    }
    # One set of columns over the stacked rows kept; each part's table is a run of its rows.
    columns_all = SeriesColumns(
        id=results.batch.ids
        if keep is None
        else tuple(results.batch.ids[i] for i in keep.tolist()),
        verdict=tuple(verdicts),
        n_obs=tuple(kept(results.residuals.n_obs).tolist()),
        weight=tuple(weights),
        sections={k: None if v is None else _tuples(v) for k, v in sections.items()},
        checks=tuple(
            CheckColumns(
                name=name,
                status=tuple(col["status"]),
                statistic=tuple(col["statistic"]),
                p_value=tuple(col["p_value"]),
                p_adjusted=tuple(col["p_adjusted"]),
                details=_tuples({k: col[f"d:{k}"] for k in results[name].details}),
                message=tuple(col["message"]),
            )
            for name, col in columns.items()
        ),
    )
    out = []
    start = 0
    for g, a in enumerate(d.assessments):
        part = SeriesTable(columns_all, start, start + counts[g])
        start += counts[g]
        n_failed = int((codes[g] == FAIL).sum())
        n_warned = int((np.maximum(codes[g], PASS) == WARN).sum())
        out.append(
            AssessmentResult(
                verdict=a.verdict,
                policy=PolicyRef(name=a.policy.name, version=a.policy.version),
                reasons=a.reasons,
                checks=a.summaries,
                fleet=FleetSummary(
                    n_series=size,
                    n_failed=n_failed,
                    n_warned=n_warned,
                    n_passed=size - n_failed - n_warned,
                    statistics={key: f.result.to_dict() for key, f in a.fleet.items()},
                ),
                series=part,
            )
        )
    return out


def _tuples(columns: Mapping[str, list[Any]]) -> dict[str, tuple[Any, ...]]:
    """Columns as the tuples the typed records hold."""
    return {k: tuple(v) for k, v in columns.items()}


def _section_columns(
    owner: str,
    fields: tuple[tuple[str, str, str], ...],
    columns: Mapping[str, Mapping[str, list[Any]]],
    n: int,
) -> dict[str, list[Any]] | None:
    """One series section's columns (``None`` when its owner did not run; a field is ``None``
    throughout when its check did not run)."""
    if owner not in columns:
        return None
    return {
        key: columns[check]["statistic" if column == "statistic" else f"d:{column}"]
        if check in columns
        else [None] * n
        for key, check, column in fields
    }
