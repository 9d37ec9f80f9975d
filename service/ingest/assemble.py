"""The last steps both parsers share: the checked columns of a request become the core's batch.

:func:`build_request` pads the flat arrays into matrices, checks the interval bounds against
each other, builds the :class:`~service.core.SeriesBatch` (an error of the core is reported
with the request field it concerns, see :func:`core_error_loc`) and returns the
:class:`~service.ingest.request.AssessmentRequest`.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

import numpy as np

from service.core import InputError, SeriesBatch, make_batch

from .arrays import padded_matrix
from .request import (
    AssessmentRequest,
    Envelope,
    Errors,
    FlatRows,
    HoldoutColumns,
    RequestInvalid,
    SeriesColumns,
)

# Where each make_batch argument lives in the request body.
_CORE_LOCS = {
    "actuals": "actuals",
    "fitted": "fitted",
    "ids": "id",
    "weights": "weight",
    "holdout_actuals": "holdout.actuals",
    "holdout_forecasts": "holdout.forecasts",
    "holdout_lower": "holdout.lower",
    "holdout_upper": "holdout.upper",
    "level": "holdout.level",
    "burn_in": "burn_in",
    "lengths": "actuals",
}


def build_request(envelope: Envelope, cols: SeriesColumns) -> AssessmentRequest:
    """The request of ``envelope`` and ``cols``; raises :class:`RequestInvalid` for crossed
    interval bounds or what the core refuses."""
    n = len(cols.ids)
    a_len = cols.actuals.lengths
    width = int(a_len.max(initial=0))
    kwargs: dict[str, Any] = {}
    h_len = np.zeros(n, dtype=np.int64)
    h_ts: Sequence[list[str] | None] = [None] * n
    if cols.holdout is not None:
        h_len = cols.holdout.actuals.lengths
        h_ts = cols.holdout.timestamps
        kwargs = _holdout_matrices(cols.holdout)
    given = list(cols.burn_in) if cols.burn_in is not None else [None] * n
    burn_in = np.array(
        [envelope.burn_in if b is None else b for b in given], dtype=np.int64
    ).reshape(n)
    # make_batch copies what it is given: the request keeps its own fitted values only when
    # a burn-in drops some of them from the batch.
    fitted = padded_matrix(cols.fitted.values, a_len, width, copy=bool(burn_in.any()))
    batch = _make_batch(
        padded_matrix(cols.actuals.values, a_len, width, copy=False),
        fitted,
        ids=cols.ids,
        weights=cols.weights,
        season_length=envelope.season_length,
        model_params=envelope.model_params,
        # A series ends at its given length: a trailing missing actual is a gap.
        lengths=a_len,
        burn_in=burn_in,
        **kwargs,
    )
    return AssessmentRequest(
        model=envelope.model,
        version=envelope.version,
        policy=envelope.policy,
        season_length=envelope.season_length,
        model_params=envelope.model_params,
        labels=envelope.labels,
        ids=tuple(cols.ids),
        batch=batch,
        timestamps=_kept(cols.timestamps),
        holdout_timestamps=_kept(h_ts),
        train_lengths=a_len,
        holdout_lengths=h_len,
        weights_given=tuple(cols.weights),
        baseline=envelope.baseline,
        request_burn_in=envelope.burn_in,
        burn_in=burn_in,
        burn_in_given=tuple(given),
        fitted_given=fitted if burn_in.any() else None,
    )


def _kept(stamps: Sequence[list[str] | None]) -> Sequence[list[str] | None]:
    """Lists become tuples; a sequence that makes its items on demand is kept as it is."""
    return tuple(stamps) if isinstance(stamps, list) else stamps


def _holdout_matrices(h: HoldoutColumns) -> dict[str, Any]:
    """``make_batch``'s holdout arguments, after checking lower against upper."""
    h_len = h.actuals.lengths
    hwidth = int(h_len.max(initial=0))
    out: dict[str, Any] = {
        "holdout_actuals": padded_matrix(h.actuals.values, h_len, hwidth),
        "holdout_forecasts": padded_matrix(h.forecasts.values, h_len, hwidth),
    }
    if h.lower is not None and h.upper is not None:
        check_bounds(h.lower, h.upper)
        out["holdout_lower"] = padded_matrix(h.lower.values, h.lower.lengths, hwidth)
        out["holdout_upper"] = padded_matrix(h.upper.values, h.lower.lengths, hwidth)
        out["level"] = h.levels
    return out


def check_bounds(lower: FlatRows, upper: FlatRows) -> None:
    """Raise for every series (its first position) whose lower bound is above its upper."""
    lo, up = lower.values, upper.values
    crossed = lo > up
    if not crossed.any():
        return
    errs = Errors()
    lengths = lower.lengths
    ends = np.cumsum(lengths)
    done: set[int] = set()
    for pos in np.flatnonzero(crossed):
        i = int(np.searchsorted(ends, pos, side="right"))
        if i in done:
            continue
        done.add(i)
        j = int(pos - (ends[i] - lengths[i]))
        errs.add(
            f"series[{i}].holdout.lower",
            f"lower bound {lo[pos]:g} is above upper bound {up[pos]:g} at index {j}",
        )
        if errs.full:
            break
    errs.check()


def core_error_loc(exc: InputError) -> str:
    """The request field a core :class:`InputError` concerns, e.g. ``series[3].holdout.level``."""
    field_loc = _CORE_LOCS.get(exc.argument)
    if field_loc is None:
        return exc.argument
    if exc.index is None:
        return f"series[*].{field_loc}"
    return f"series[{exc.index}].{field_loc}"


def _make_batch(*args: Any, **kwargs: Any) -> SeriesBatch:
    try:
        return make_batch(*args, **kwargs)
    except InputError as exc:
        raise RequestInvalid([{"loc": core_error_loc(exc), "message": exc.message}]) from None
