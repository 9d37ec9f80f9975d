"""The baseline of an assessment: a stored version of the same model, its holdout matched to
the new one's.

:func:`resolve` finds the stored assessment the request's ``baseline.version`` names (a version,
or ``latest-pass``: the newest other version whose latest verdict passed) and reads its stored
holdout arrays through the :class:`~service.store.port.Store`. :func:`match` lines its series
up with the new holdout's: series by id, periods by timestamp when both sides give timestamps,
else by position. A series or period without a counterpart is left ``NaN`` (never guessed) and
counted in the :class:`Match`'s :meth:`~Match.block`, which goes into the stored result as its
``baseline`` field. :func:`with_baseline` gives the core's batch the matched arrays.

Each problem is a 422 naming ``baseline.version`` (or ``baseline`` when the request itself has
no holdout to compare): a version with no stored assessment, one without a holdout, one that
shares no series with the request.
"""

from __future__ import annotations

import warnings
from collections.abc import Sequence
from dataclasses import dataclass, field, replace
from typing import Any

import numpy as np

from service.core import InputError, SeriesBatch, make_batch
from service.ingest.shape import LATEST_PASS
from service.store.port import Store
from service.store.records import AssessmentSummary, SeriesInput

from .errors import ApiError

LOC = "baseline.version"
MAX_LISTED_IDS = 100
"""At most this many series ids are listed per kind of unmatched series (the counts are
whole)."""


@dataclass(frozen=True)
class Source:
    """The stored assessment a baseline names and its per-series inputs."""

    requested: str
    summary: AssessmentSummary
    inputs: list[SeriesInput]


@dataclass(frozen=True, eq=False)
class Match:
    """The baseline's holdout lined up with the new one: arrays of the new holdout's shape,
    ``NaN`` where a series or period has no matched baseline value; ``lower``/``upper``
    ``None`` when no matched series has an interval."""

    source: Source
    forecasts: np.ndarray
    lower: np.ndarray | None
    upper: np.ndarray | None
    matched: np.ndarray
    """Per new series: the number of its holdout periods with a baseline value."""
    by_timestamp: np.ndarray
    """Per new series: matched by timestamp (else by position, where matched at all)."""
    unmatched_periods: np.ndarray
    """Per new series with a counterpart: its holdout periods without a baseline value."""
    unmatched_ids: list[str] = field(default_factory=list)
    """New series with a holdout and no baseline value at all."""
    baseline_only_ids: list[str] = field(default_factory=list)
    """Baseline series with a holdout that the new request does not have."""

    @property
    def version(self) -> str:
        return self.source.summary.version

    def block(self) -> dict[str, Any]:
        """The ``baseline`` field of the result: which stored assessment was compared and what
        could not be matched (counts whole, ids up to :data:`MAX_LISTED_IDS`)."""
        s = self.source.summary
        hit = self.matched > 0
        return {
            "requested": self.source.requested,
            "version": s.version,
            "assessment_id": s.id,
            "created_at": s.created_at.isoformat(),
            "verdict": s.verdict,
            "matched_series": int(hit.sum()),
            "matched_periods": int(self.matched.sum()),
            "matched_by": {
                "timestamp": int((hit & self.by_timestamp).sum()),
                "position": int((hit & ~self.by_timestamp).sum()),
            },
            "unmatched_periods": int(self.unmatched_periods[hit].sum()),
            "unmatched_series": len(self.unmatched_ids),
            "unmatched_series_ids": self.unmatched_ids[:MAX_LISTED_IDS],
            "baseline_only_series": len(self.baseline_only_ids),
            "baseline_only_series_ids": self.baseline_only_ids[:MAX_LISTED_IDS],
        }


def _error(detail: str, loc: str = LOC) -> ApiError:
    return ApiError(422, f"{loc}: {detail}", errors=[{"loc": loc, "message": detail}])


def find(
    store: Store, model: str, requested: str, own_version: str | None, *, loc: str = LOC
) -> AssessmentSummary:
    """The stored assessment ``requested`` names for ``model`` (its version's latest); 422
    naming ``loc`` when there is none. ``latest-pass`` leaves out ``own_version``."""
    if requested == LATEST_PASS:
        found = store.latest_passing_assessment(model=model, exclude_version=own_version)
        if found is None:
            raise _error(
                f"latest-pass: no other stored version of model {model!r} has a latest "
                "verdict of pass",
                loc,
            )
        return found
    found = store.latest_assessment(model=model, version=requested)
    if found is None:
        raise _error(f"no stored assessment of model {model!r} version {requested!r}", loc)
    return found


def resolve(
    store: Store, model: str, requested: str, own_version: str | None, *, loc: str = LOC
) -> Source:
    """The stored baseline ``requested`` names, with its inputs; 422 naming ``loc`` when it
    does not exist or has no holdout."""
    summary = find(store, model, requested, own_version, loc=loc)
    inputs = store.series_inputs(assessment_id=summary.id) or []
    if not any(_has_holdout(s) for s in inputs):
        raise _error(
            f"version {summary.version!r} of model {model!r} (assessment {summary.id}) has no "
            "holdout to compare with",
            loc,
        )
    return Source(requested=requested, summary=summary, inputs=inputs)


def _has_holdout(s: SeriesInput) -> bool:
    return s.holdout_forecasts is not None and s.holdout_forecasts.size > 0


def _instants(stamps: Sequence[str]) -> np.ndarray:
    """ISO 8601 strings as microseconds (zones converted to UTC), as the parser reads them."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return np.array(list(stamps), dtype="datetime64[us]").astype(np.int64)


def match(
    source: Source,
    ids: Sequence[str],
    lengths: np.ndarray,
    timestamps: Sequence[Sequence[str] | None],
    width: int,
    *,
    loc: str = LOC,
) -> Match:
    """Line the baseline's holdouts up with the new series ``ids`` (holdout ``lengths`` and
    ``timestamps`` as sent, matrices ``width`` wide); 422 when no series has a matched
    period.

    Per series: when both sides give timestamps, each new period takes the baseline's value
    at the same instant; otherwise step ``h`` takes the baseline's step ``h``. A baseline
    value that is missing (``NaN``) matches nothing.
    """
    n = len(ids)
    forecasts = np.full((n, width), np.nan)
    lower = np.full((n, width), np.nan)
    upper = np.full((n, width), np.nan)
    by_timestamp = np.zeros(n, dtype=bool)
    stored = {s.series_id: s for s in source.inputs if _has_holdout(s)}
    wanted: set[str] = set()
    pairs: list[tuple[int, SeriesInput]] = []
    for i, sid in enumerate(ids):
        if lengths[i] == 0:
            continue
        wanted.add(sid)
        base = stored.get(sid)
        if base is not None:
            pairs.append((i, base))
            by_timestamp[i] = timestamps[i] is not None and base.holdout_timestamps is not None
    any_interval = any(b.holdout_lower is not None for _, b in pairs)
    for group in (
        [p for p in pairs if by_timestamp[p[0]]],
        [p for p in pairs if not by_timestamp[p[0]]],
    ):
        if not group:
            continue
        rows, values, lo, up, base_len = _flat(group)
        if by_timestamp[group[0][0]]:
            at, src = _by_instant(group, rows, timestamps, lengths, base_len)
        else:
            at, src = _by_step(rows, np.asarray(lengths)[rows], base_len)
        forecasts[at] = values[src]
        if any_interval:
            lower[at] = lo[src]
            upper[at] = up[src]
    matched = (~np.isnan(forecasts)).sum(axis=1)
    unmatched_ids = [sid for i, sid in enumerate(ids) if lengths[i] > 0 and matched[i] == 0]
    if not matched.any():
        raise _error(
            f"version {source.summary.version!r} shares no series: no series id has holdout "
            "periods on both sides that match (by timestamp, else by position)",
            loc,
        )
    # Where the bounds are missing on one side only, the interval is missing there.
    missing_bound = np.isnan(lower) | np.isnan(upper)
    lower[missing_bound] = np.nan
    upper[missing_bound] = np.nan
    return Match(
        source=source,
        forecasts=forecasts,
        lower=lower if any_interval and not missing_bound.all() else None,
        upper=upper if any_interval and not missing_bound.all() else None,
        matched=matched,
        by_timestamp=by_timestamp,
        unmatched_periods=np.maximum(np.asarray(lengths, dtype=np.int64) - matched, 0),
        unmatched_ids=unmatched_ids,
        baseline_only_ids=[sid for sid in stored if sid not in wanted],
    )


def _flat(
    group: list[tuple[int, SeriesInput]],
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """The new rows of ``group`` and its baselines' holdouts joined into flat arrays (bounds
    ``NaN`` where a baseline has none), with each baseline's length."""
    rows = np.array([i for i, _ in group], dtype=np.int64)
    fc = [b.holdout_forecasts for _, b in group]
    base_len = np.array([f.size for f in fc], dtype=np.int64)  # type: ignore[union-attr]

    def bound(name: str) -> np.ndarray:
        parts = [getattr(b, name) for _, b in group]
        if all(p is None for p in parts):
            return np.full(int(base_len.sum()), np.nan)
        return np.concatenate(
            [np.full(f.size, np.nan) if p is None else p for p, f in zip(parts, fc, strict=True)]  # type: ignore[union-attr]
        )

    return rows, np.concatenate(fc), bound("holdout_lower"), bound("holdout_upper"), base_len  # type: ignore[arg-type]


def _starts(lengths: np.ndarray) -> np.ndarray:
    return np.cumsum(lengths) - lengths


def _by_step(
    rows: np.ndarray, new_len: np.ndarray, base_len: np.ndarray
) -> tuple[tuple[np.ndarray, np.ndarray], np.ndarray]:
    """Step ``h`` of each new row takes step ``h`` of its baseline, where both have it: the
    ``(row, column)`` places and the flat baseline positions they take."""
    count = np.minimum(new_len, base_len)
    cols = np.arange(count.sum()) - np.repeat(_starts(count), count)
    src = np.repeat(_starts(base_len), count) + cols
    return (np.repeat(rows, count), cols), src


def _by_instant(
    group: list[tuple[int, SeriesInput]],
    rows: np.ndarray,
    timestamps: Sequence[Sequence[str] | None],
    lengths: np.ndarray,
    base_len: np.ndarray,
) -> tuple[tuple[np.ndarray, np.ndarray], np.ndarray]:
    """Each new period takes its baseline's value at the same instant: every timestamp of
    the group parsed at once, ranked over both sides, and looked up by (row, rank) keys
    (each side's timestamps increase within a row, so the baseline's keys are sorted)."""
    new_len = np.asarray(lengths, dtype=np.int64)[rows]
    new_flat = [t for i, _ in group for t in list(timestamps[i])[: int(lengths[i])]]  # type: ignore[arg-type]
    base_flat = [t for _, b in group for t in b.holdout_timestamps]  # type: ignore[union-attr]
    instants = _instants(new_flat + base_flat)
    _, rank = np.unique(instants, return_inverse=True)
    span = int(rank.max(initial=0)) + 1
    owner = np.arange(rows.size, dtype=np.int64)
    new_key = np.repeat(owner, new_len) * span + rank[: len(new_flat)]
    base_key = np.repeat(owner, base_len) * span + rank[len(new_flat) :]
    pos = np.minimum(np.searchsorted(base_key, new_key), base_key.size - 1)
    hit = base_key[pos] == new_key
    cols = np.arange(new_key.size) - np.repeat(_starts(new_len), new_len)
    return (np.repeat(rows, new_len)[hit], cols[hit]), pos[hit]


def with_baseline(batch: SeriesBatch, found: Match) -> SeriesBatch:
    """``batch`` rebuilt by the core with the matched baseline arrays (every other argument
    as the batch holds it, so the rest of the assessment is unchanged)."""
    h = batch.holdout
    assert h is not None
    kwargs: dict[str, Any] = {}
    if h.lower is not None and h.upper is not None:
        kwargs = {"holdout_lower": h.lower, "holdout_upper": h.upper, "level": h.level}
    if found.lower is not None and found.upper is not None:
        kwargs["baseline_lower"] = found.lower
        kwargs["baseline_upper"] = found.upper
    return make_batch(
        batch.actuals,
        batch.fitted,
        ids=batch.ids,
        weights=np.where(batch.weights_given, batch.weights, np.nan),
        season_length=batch.season_length,
        model_params=batch.model_params,
        holdout_actuals=h.actuals,
        holdout_forecasts=h.forecasts,
        lengths=batch.lengths,
        burn_in=batch.burn_in,
        baseline_forecasts=found.forecasts,
        baseline_label=found.version,
        **kwargs,
    )


def for_request(store: Store, req: Any) -> Match:
    """The matched baseline of a parsed request whose ``baseline`` is set; 422 when it cannot
    be compared."""
    if req.batch.holdout is None or not np.asarray(req.holdout_lengths).any():
        raise _error(
            "a baseline is compared on the holdout, and no series of this request has one",
            loc="baseline",
        )
    source = resolve(store, req.model, req.baseline, req.version)
    width = req.batch.holdout.forecasts.shape[1]
    return match(source, req.ids, req.holdout_lengths, req.holdout_timestamps, width)


def attach(store: Store, jobs: Sequence[Any], outcomes: list[Any]) -> None:
    """Give each job that asks for a baseline and has no error yet (``outcomes[i]`` is
    ``None``) its matched baseline (``job.baseline``) and the batch that carries it; a job that
    cannot be compared gets its error in ``outcomes`` instead (a 422, or the store's error)."""
    from service.store.port import StoreError

    for i, job in enumerate(jobs):
        if outcomes[i] is not None or job.req.baseline is None or job.baseline is not None:
            continue
        try:
            found = for_request(store, job.req)
            batch = with_baseline(job.req.batch, found)
        except (ApiError, StoreError) as exc:
            outcomes[i] = exc
            continue
        except InputError as exc:
            outcomes[i] = _error(f"the core refused the matched baseline: {exc.message}")
            continue
        job.baseline = found
        job.req = replace(job.req, batch=batch)
