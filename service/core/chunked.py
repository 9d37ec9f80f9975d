"""A fleet assessed chunk by chunk, in bounded memory, with the one-shot assessment's numbers.

:func:`assess_chunks` reads the fleet as an iterable of :class:`~service.core.batch.SeriesBatch`
chunks (every chunk of the fleet's shape: :func:`~service.core.batch.conform`), regroups them
into parts of a whole number of :data:`~service.core.fleet_parts.BLOCK` series, and for each
part runs the checks and gathers the fleet-level tests' block parts (:func:`assess_part`). Across
parts it keeps only what the fleet decision needs: every series' check results (statistics,
p-values, details, skip reasons), its weight and its residual counts, and the fixed-size
per-period sums of the fleet-level tests, combined block by block in order
(:class:`~service.core.fleet_parts.Accumulator`). The observations of a part are dropped once its
results are in, so peak memory grows with the number of series, not of observations.

The result equals ``assess(whole_batch, policy)`` to the last bit, whatever the chunks: every
check works row by row (a row's arithmetic does not depend on the rows beside it, at a given
width), the gate's adjustments, shares and family sizes run over the same per-series arrays,
and the fleet-level tests' cross-sectional sums are taken over the same blocks in the same
order as the one-shot path takes them.

The parts can run elsewhere: ``executor`` is anything with ``submit(fn, *args)`` returning a
future with ``result()`` (a :class:`concurrent.futures.Executor`, or a ``dask.distributed``
``Client``, which :mod:`service.cluster` connects to); at most ``window`` parts are in flight,
their results taken in order.
"""

from __future__ import annotations

from collections import deque
from collections.abc import Callable, Iterable, Iterator, Mapping
from dataclasses import dataclass, fields
from typing import Any, Protocol

import numpy as np

from . import fleet_parts
from .batch import Baseline, Holdout, Residuals, SeriesBatch, stack_batches
from .fleet_parts import Accumulator, FleetPart
from .gate import Assessment, WeightsNotUsed, _decide_parts, _plan, _weights
from .policy import Policy
from .registry import all_checks
from .results import CheckResult, is_constant
from .runner import BatchChecks, run_checks
from .types import InputError

PART_BLOCKS = 16
"""Blocks of series per part (16 x 1024 = 16,384 series), the unit of work of a chunked
assessment."""

Progress = Callable[[int, int | None], None]
"""``progress(series_done, series_total)``; the total is ``None`` when not known."""

_RESIDUAL_VECTORS = (
    "n_obs",
    "n_missing",
    "start",
    "lengths",
    "mean",
    "constant",
    "unit",
    "rounding_scale",
)
"""The per-series fields of :class:`~service.core.batch.Residuals` a chunked assessment keeps
(its matrices are dropped with the part's observations)."""


class _Future(Protocol):
    def result(self) -> Any: ...


class Executor(Protocol):
    """What runs the parts: ``submit(fn, *args)`` returning a future."""

    def submit(self, fn: Callable[..., Any], /, *args: Any, **kwargs: Any) -> _Future: ...


@dataclass(frozen=True, eq=False)
class PartResult:
    """What one part hands back: its series' ids, check results, residual counts, weights,
    and each fleet-level test's parts, one per block of :data:`BLOCK` series, in order."""

    ids: tuple[str, ...]
    checks: dict[str, CheckResult]
    residuals: Mapping[str, np.ndarray]
    given_weights: np.ndarray
    weights_given: np.ndarray
    burn_in: np.ndarray
    fleet: Mapping[str, list[FleetPart]]


def assess_part(batch: SeriesBatch, policy: Policy) -> PartResult:
    """Run the policy's checks over one part of a fleet and gather its fleet-level tests'
    block parts (blocks of :data:`BLOCK` series counted from the part's first series, which a
    chunked assessment puts at a multiple of :data:`BLOCK` in the fleet)."""
    _, enabled, options = _plan(policy)
    checks = run_checks(batch, options, only=enabled)
    weights = _weights(batch, policy)
    fleet = {
        check.fleet.key: check.fleet.gather_blocks(checks, weights, policy)
        for check in all_checks()
        if check.fleet is not None and check.name in checks.checks
    }
    res = checks.residuals
    return PartResult(
        ids=batch.ids,
        checks=dict(checks.checks),
        residuals={name: getattr(res, name) for name in _RESIDUAL_VECTORS},
        given_weights=batch.weights,
        weights_given=batch.weights_given,
        burn_in=batch.burn_in,
        fleet=fleet,
    )


def _shape(batch: SeriesBatch) -> tuple[object, ...]:
    h = batch.holdout
    hold = None if h is None else (h.actuals.shape[1], h.lower is not None, h.level is not None)
    b = batch.baseline
    base = None if b is None else (b.label, b.lower is not None)
    return (batch.actuals.shape[1], batch.season_length, batch.model_params, hold, base)


def _describe(shape: tuple[object, ...]) -> str:
    width, season, params, hold, base = shape
    text = f"{width} periods, season length {season}, {params} model parameters"
    if hold is None:
        return text + ", no holdout"
    assert isinstance(hold, tuple)
    text += f", a {hold[0]}-step holdout" + (" with intervals" if hold[1] else "")
    return text + ("" if base is None else f", a baseline {base!r}")


def _parts(
    chunks: Iterable[SeriesBatch], size: int, policy: Policy
) -> Iterator[tuple[int, SeriesBatch]]:
    """The chunks regrouped into parts of ``size`` series (the last may be shorter), with the
    fleet position of each part's first series; chunks are checked against the first (shape,
    unique ids across chunks, weights the policy uses)."""
    pending: list[SeriesBatch] = []
    held = 0
    done = 0
    offset = 0
    first: tuple[object, ...] | None = None
    seen: set[str] = set()
    weighting = policy.fleet.weighting
    for k, chunk in enumerate(chunks):
        if not isinstance(chunk, SeriesBatch):
            raise InputError("chunks", f"chunk {k} is not a SeriesBatch (make_batch builds one)")
        shape = _shape(chunk)
        if first is None:
            first = shape
        elif shape != first:
            raise InputError(
                "chunks",
                f"chunk {k} has {_describe(shape)}; the first had {_describe(first)}: give "
                "every chunk the fleet's shape (service.core.batch.conform)",
            )
        for i, sid in enumerate(chunk.ids):
            if sid in seen:
                raise InputError("ids", f"duplicate series id {sid!r}", index=offset + i)
            seen.add(sid)
        if weighting in ("volume", "count") and chunk.weights_given.any():
            raise WeightsNotUsed(weighting, offset + int(np.argmax(chunk.weights_given)))
        offset += chunk.n_series
        if chunk.n_series == 0:
            continue
        pending.append(chunk)
        held += chunk.n_series
        while held >= size:
            whole = stack_batches(pending)
            yield done, whole.rows(slice(0, size))
            done += size
            held -= size
            pending = [whole.rows(slice(size, None))] if held else []
    if held:
        yield done, stack_batches(pending)


def _submit(executor: Executor | None, batch: SeriesBatch, policy: Policy) -> _Future:
    if executor is None:
        return _Done(assess_part(batch, policy))
    if type(executor).__module__.startswith("distributed"):
        # A dask Client: each part is a distinct task, never deduplicated by its arguments.
        return executor.submit(assess_part, batch, policy, pure=False)
    return executor.submit(assess_part, batch, policy)


@dataclass(frozen=True)
class _Done:
    value: PartResult

    def result(self) -> PartResult:
        return self.value


def assess_chunks(
    chunks: Iterable[SeriesBatch],
    policy: Policy,
    progress: Progress | None = None,
    executor: Executor | None = None,
    *,
    total: int | None = None,
    part_blocks: int = PART_BLOCKS,
    window: int = 4,
) -> Assessment:
    """Assess a fleet read chunk by chunk: ``assess(whole, policy)`` to the last bit (see the
    module docstring), holding one part's observations at a time (``window`` parts in flight
    with an ``executor``).

    ``chunks``: batches of the fleet's series in order, each of the fleet's shape (the
    training width, season length, model parameters, holdout steps and whether intervals are
    given: :func:`~service.core.batch.conform` pads a chunk to it), of any sizes. ``progress``
    is called with the series done and ``total`` (default ``chunks.n_series`` where the
    iterable has one) after each part. ``executor`` runs :func:`assess_part` on each part
    (default: here, one after the other). ``part_blocks``: blocks of :data:`BLOCK` series
    per part.

    Raises :class:`~service.core.types.InputError` for chunks of different shapes, a series id
    that repeats across chunks, weights the policy ignores, or no series at all.
    """
    if part_blocks < 1:
        raise InputError("part_blocks", f"must be at least 1, got {part_blocks}")
    if window < 1:
        raise InputError("window", f"must be at least 1, got {window}")
    if total is None:
        total = getattr(chunks, "n_series", None)
    cps_all = _plan(policy)[0]
    store = _Store(total)
    fleet: dict[str, Accumulator] = {}
    in_flight: deque[tuple[int, _Future]] = deque()
    template: SeriesBatch | None = None

    def take(start: int, future: _Future) -> None:
        result: PartResult = future.result()
        for key, blocks in result.fleet.items():
            acc = fleet.setdefault(key, Accumulator())
            for block in blocks:
                acc.add(block)
        # The observations stay behind; the part's results are all that is kept, written into
        # the fleet's columns (a column of one value throughout held once).
        store.add(result)
        if progress is not None:
            progress(start + len(result.ids), total)

    for start, part in _parts(chunks, part_blocks * fleet_parts.BLOCK, policy):
        if template is None:
            template = part
        in_flight.append((start, _submit(executor, part, policy)))
        del part
        while len(in_flight) >= window or (executor is None and in_flight):
            take(*in_flight.popleft())
    while in_flight:
        take(*in_flight.popleft())
    if template is None:
        raise InputError("chunks", "no series: the chunks hold none")
    checks = store.checks(template)
    parts = {key: acc.result() for key, acc in fleet.items()}
    return _decide_parts(checks, [checks.batch], policy, cps_all, parts).assessments[0]


class _Column:
    """One per-series column of the fleet, filled part by part: a single value while every
    part holds only that value (bit for bit), else an array, sized to the fleet when its size is
    known (else grown by doubling and trimmed at the end)."""

    __slots__ = ("full", "size", "value")

    def __init__(self) -> None:
        self.value: np.ndarray | None = None
        self.full: np.ndarray | None = None
        self.size = 0

    def add(self, values: np.ndarray, capacity: int | None) -> None:
        m = values.shape[0]
        if m == 0:
            return
        if self.full is None:
            if self.value is None and is_constant([values]):
                self.value = values[:1].copy()
                self.size = m
                return
            if self.value is not None and is_constant([self.value, values]):
                self.size += m
                return
            room = max(capacity or 0, 2 * (self.size + m))
            dtype = values.dtype if self.value is None else np.result_type(self.value, values)
            self.full = np.empty(room, dtype=dtype)
            if self.value is not None:
                self.full[: self.size] = self.value[0]
        if self.full.shape[0] < self.size + m:
            grown = np.empty(2 * (self.size + m), dtype=self.full.dtype)
            grown[: self.size] = self.full[: self.size]
            self.full = grown
        if values.dtype != self.full.dtype:
            self.full = self.full.astype(np.result_type(self.full, values))
        self.full[self.size : self.size + m] = values
        self.size += m

    def result(self) -> np.ndarray:
        if self.full is None:
            assert self.value is not None
            return np.broadcast_to(self.value, (self.size,))
        out = self.full if self.full.shape[0] == self.size else self.full[: self.size].copy()
        self.full = None
        out.flags.writeable = False
        return out


class _Store:
    """The per-series results of a chunked assessment, column by column (see :class:`_Column`).

    ``total``, when known, sizes each column once."""

    def __init__(self, total: int | None) -> None:
        self.total = total
        self.ids: list[str] = []
        self.columns: dict[str, _Column] = {}
        self.meta: dict[str, CheckResult] = {}

    def _put(self, key: str, values: np.ndarray) -> None:
        self.columns.setdefault(key, _Column()).add(values, self.total)

    def add(self, part: PartResult) -> None:
        self.ids.extend(part.ids)
        for name, r in part.checks.items():
            self.meta.setdefault(name, r)
            self._put(f"{name}:statistic", r.statistic)
            self._put(f"{name}:p_value", r.p_value)
            self._put(f"{name}:skip_reason", r.skip_reason)
            self._put(f"{name}:skipped", r.skipped)
            for key, values in r.details.items():
                self._put(f"{name}:d:{key}", values)
        for key, values in part.residuals.items():
            self._put(f"residuals:{key}", values)
        self._put("given_weights", part.given_weights)
        self._put("weights_given", part.weights_given)
        self._put("burn_in", part.burn_in)

    def take(self, key: str) -> np.ndarray:
        return self.columns.pop(key).result()

    def checks(self, template: SeriesBatch) -> BatchChecks:
        """The fleet's checks: every series' check results, and a batch and residuals holding
        the per-series values and no observations (zero periods)."""
        n = len(self.ids)
        checks = {}
        for name, first in self.meta.items():
            out = object.__new__(CheckResult)
            for field_name, value in (
                ("name", first.name),
                ("kind", first.kind),
                ("statistic", self.take(f"{name}:statistic")),
                ("p_value", self.take(f"{name}:p_value")),
                ("details", {k: self.take(f"{name}:d:{k}") for k in first.details}),
                ("skip_reason", self.take(f"{name}:skip_reason")),
                ("null_hypothesis", first.null_hypothesis),
                ("detail_keys", first.detail_keys),
                ("_skipped", self.take(f"{name}:skipped")),
            ):
                object.__setattr__(out, field_name, value)
            checks[name] = out
        self.meta.clear()
        vectors = {name: self.take(f"residuals:{name}") for name in _RESIDUAL_VECTORS}
        empty = np.zeros((n, 0))
        empty.flags.writeable = False
        no_obs = np.zeros((n, 0), dtype=bool)
        no_obs.flags.writeable = False
        holdout = None
        if template.holdout is not None:
            holdout = Holdout(actuals=empty, forecasts=empty)
        baseline = None
        if template.baseline is not None:
            baseline = Baseline(forecasts=empty, label=template.baseline.label)
        batch = SeriesBatch(
            ids=tuple(self.ids),
            actuals=empty,
            fitted=empty,
            weights=self.take("given_weights"),
            season_length=template.season_length,
            model_params=template.model_params,
            holdout=holdout,
            lengths=vectors["lengths"],
            burn_in=self.take("burn_in"),
            weights_given=self.take("weights_given"),
            baseline=baseline,
        )
        self.ids = []
        matrices = {
            f.name: (no_obs if f.name == "observed" else empty)
            for f in fields(Residuals)
            if f.name not in _RESIDUAL_VECTORS
        }
        residuals = Residuals(**vectors, **matrices)  # type: ignore[arg-type]
        return BatchChecks(batch=batch, residuals=residuals, checks=checks)
