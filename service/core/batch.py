"""The batch of series the core works on, validated once at the door.

Rules fixed here, used by every check:

* Residuals are ``e = actual - fitted``; a residual is missing where either value is missing.
* A series' training period ends at its given length, by default at its last observed actual or
  fitted value; anything after it is padding. A missing actual is a gap wherever it sits, the
  last period included.
* ``burn_in`` periods at the start of a series (a model's start-up values, such as the first
  ``d + mD`` fitted values of a differenced ARIMA) are dropped before any check: their fitted
  values count as missing. Their actuals stay training data (benchmarks, the MASE scale).
* Leading periods without a fitted value (a naive method has none at ``t = 1``) are dropped: the
  residual span starts at the first observed residual.
* Interior gaps stay gaps, never filled: means and variances use the residuals that are there;
  a lagged quantity uses only the pairs (or regression rows) whose values are all observed, the
  rule statsmodels calls ``missing="conservative"``. The effective sample size ``n_obs`` is the
  number of observed residuals.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass, fields
from typing import Any, cast

import numpy as np

from .types import BoolMatrix, BoolVector, FloatMatrix, FloatVector, InputError, IntVector

DEFAULT_LEVEL = 0.95
MAX_MAGNITUDE = 1e250
"""Largest accepted ``|value|``: sums over a long series must stay finite."""


def _matrix(name: str, values: object, n_series: int | None = None) -> FloatMatrix:
    """Coerce to a 2-D float array; ragged sequences are padded on the right with NaN."""
    try:
        if isinstance(values, np.ndarray):
            arr = values.astype(float, copy=True)
        else:
            rows = list(values)  # type: ignore[call-overload]
            width = max((len(r) for r in rows), default=0)
            arr = np.full((len(rows), width), np.nan)
            for i, row in enumerate(rows):
                # ``None`` becomes NaN; ``float`` accepts any real number.
                arr[i, : len(row)] = [np.nan if v is None else v for v in row]
    except (TypeError, ValueError) as exc:
        raise InputError(name, "expected rows (one per series) of numbers or null") from exc
    if arr.ndim == 1:
        arr = arr[None, :]
    if arr.ndim != 2:
        raise InputError(name, f"expected a 2-D array (series x periods), got {arr.ndim}-D")
    if n_series is not None and arr.shape[0] != n_series:
        raise InputError(name, f"has {arr.shape[0]} rows, expected {n_series} (one per series)")
    if arr.size == 0 or (
        -float(np.fmin.reduce(arr, axis=None)) <= MAX_MAGNITUDE
        and float(np.fmax.reduce(arr, axis=None)) <= MAX_MAGNITUDE
    ):
        return arr  # NaN aside, every value within the bound (no temporary)
    with np.errstate(invalid="ignore"):
        huge = np.abs(arr) > MAX_MAGNITUDE  # infinities included
    if huge.any() and np.isinf(arr).any():
        row = int(np.argwhere(np.isinf(arr))[0, 0])
        raise InputError(name, "contains an infinite value", index=row)
    if huge.any():
        row = int(np.argwhere(huge)[0, 0])
        raise InputError(name, f"contains a value beyond {MAX_MAGNITUDE:g} in magnitude", index=row)
    return arr


def _same_shape(name: str, arr: FloatMatrix, like: FloatMatrix, like_name: str) -> FloatMatrix:
    if arr.shape == like.shape:
        return arr
    if arr.shape[0] == like.shape[0] and arr.shape[1] <= like.shape[1]:
        # A shorter ragged row set pads to the same width.
        out = np.full(like.shape, np.nan)
        out[:, : arr.shape[1]] = arr
        return out
    raise InputError(name, f"shape {arr.shape} does not match {like_name} {like.shape}")


def _row_lengths(arr: FloatMatrix) -> IntVector:
    """Index of the last observed value + 1 per row (0 for an all-missing row)."""
    observed = ~np.isnan(arr)
    width = arr.shape[1]
    if width == 0:
        return np.zeros(arr.shape[0], dtype=np.int64)
    last = width - np.argmax(observed[:, ::-1], axis=1)
    return np.where(observed.any(axis=1), last, 0).astype(np.int64)


def _check_row_lengths(name: str, arr: FloatMatrix, lengths: IntVector) -> None:
    short = np.flatnonzero(lengths < arr.shape[1])  # only these rows can run past their end
    if short.size == 0:
        return
    longer = _row_lengths(arr[short]) > lengths[short]
    if longer.any():
        raise InputError(
            name,
            "has values after the end of the series",
            index=int(short[np.argmax(longer)]),
        )


def _per_series(name: str, value: int | Sequence[int] | IntVector | None, n: int) -> IntVector:
    """A non-negative integer for every series: one for all, or one each."""
    if value is None:
        return np.zeros(n, dtype=np.int64)
    if isinstance(value, np.ndarray) and value.ndim == 1 and value.dtype.kind == "i":
        if value.shape[0] != n:
            raise InputError(name, f"has {value.shape[0]} entries, expected {n}")
        negative = value < 0
        if negative.any():
            raise InputError(name, "must be an integer >= 0", index=int(np.argmax(negative)))
        return value.astype(np.int64)  # a copy: the batch's own
    if np.ndim(value) == 0:
        values = [value] * n
    else:
        values = list(value)  # type: ignore[arg-type]
        if len(values) != n:
            raise InputError(name, f"has {len(values)} entries, expected {n}")
    for i, v in enumerate(values):
        if isinstance(v, bool) or not isinstance(v, (int, np.integer)) or v < 0:
            raise InputError(
                name, "must be an integer >= 0", index=None if np.ndim(value) == 0 else i
            )
    return np.asarray(values, dtype=np.int64)


@dataclass(frozen=True, eq=False)
class Holdout:
    """Out-of-sample part: shape ``(n_series, horizon)``, column ``h`` is step ``h + 1``.

    A row that is all ``NaN`` means the series has no holdout. ``lower``/``upper`` may be
    absent; ``level`` is the nominal coverage of the intervals per series (``NaN``: none).
    """

    actuals: FloatMatrix
    forecasts: FloatMatrix
    lower: FloatMatrix | None = None
    upper: FloatMatrix | None = None
    level: FloatVector | None = None


@dataclass(frozen=True, eq=False)
class Baseline:
    """The holdout forecasts of the version a batch is compared with (the baseline: the
    version in production), on the holdout's periods.

    ``forecasts`` has the holdout's shape ``(n_series, horizon)``, ``NaN`` where a series or
    period has no matched baseline value; ``lower``/``upper`` are its intervals (both or
    neither); ``label`` names the baseline version in sentences (``None``: "the baseline").
    """

    forecasts: FloatMatrix
    lower: FloatMatrix | None = None
    upper: FloatMatrix | None = None
    label: str | None = None

    def rows(self, index: slice | np.ndarray) -> Baseline:
        """The baseline of the rows in ``index`` (an index array or a slice)."""
        return Baseline(
            forecasts=self.forecasts[index],
            lower=None if self.lower is None else self.lower[index],
            upper=None if self.upper is None else self.upper[index],
            label=self.label,
        )


@dataclass(frozen=True, eq=False)
class SeriesBatch:
    """A validated batch of series: build it with :func:`make_batch`."""

    ids: tuple[str, ...]
    actuals: FloatMatrix
    fitted: FloatMatrix
    weights: FloatVector
    season_length: int
    model_params: int
    holdout: Holdout | None
    lengths: IntVector
    """Training length per series (periods, gaps included)."""
    burn_in: IntVector
    """Periods dropped at the start of each series (their fitted values count as missing)."""
    weights_given: BoolVector
    """Where ``weights`` holds a weight the caller gave (elsewhere: the series' volume)."""
    baseline: Baseline | None = None
    """The holdout forecasts of the version this one is compared with, if any."""

    @property
    def n_series(self) -> int:
        return len(self.ids)

    def rows(self, part: slice) -> SeriesBatch:
        """The batch restricted to the rows in ``part`` (a slice; views of the matrices)."""
        return self._select(part, self.ids[part])

    def take(self, index: np.ndarray) -> SeriesBatch:
        """The batch restricted (and reordered) to the rows in ``index``."""
        index = np.asarray(index)
        return self._select(index, tuple(self.ids[i] for i in index))

    def _select(self, rows: slice | np.ndarray, ids: tuple[str, ...]) -> SeriesBatch:
        h = self.holdout
        holdout = None
        if h is not None:
            holdout = Holdout(
                actuals=h.actuals[rows],
                forecasts=h.forecasts[rows],
                lower=None if h.lower is None else h.lower[rows],
                upper=None if h.upper is None else h.upper[rows],
                level=None if h.level is None else h.level[rows],
            )
        return SeriesBatch(
            ids=ids,
            actuals=self.actuals[rows],
            fitted=self.fitted[rows],
            weights=self.weights[rows],
            season_length=self.season_length,
            model_params=self.model_params,
            holdout=holdout,
            lengths=self.lengths[rows],
            burn_in=self.burn_in[rows],
            weights_given=self.weights_given[rows],
            baseline=None if self.baseline is None else self.baseline.rows(rows),
        )


def make_batch(
    actuals: FloatMatrix | Sequence[Sequence[float | None]],
    fitted: FloatMatrix | Sequence[Sequence[float | None]],
    *,
    ids: Sequence[str] | None = None,
    weights: Sequence[float | None] | FloatVector | None = None,
    season_length: int = 1,
    model_params: int = 0,
    holdout_actuals: FloatMatrix | Sequence[Sequence[float | None]] | None = None,
    holdout_forecasts: FloatMatrix | Sequence[Sequence[float | None]] | None = None,
    holdout_lower: FloatMatrix | Sequence[Sequence[float | None]] | None = None,
    holdout_upper: FloatMatrix | Sequence[Sequence[float | None]] | None = None,
    level: float | Sequence[float | None] | FloatVector | None = None,
    lengths: Sequence[int] | IntVector | None = None,
    burn_in: int | Sequence[int] | IntVector | None = None,
    baseline_forecasts: FloatMatrix | Sequence[Sequence[float | None]] | None = None,
    baseline_lower: FloatMatrix | Sequence[Sequence[float | None]] | None = None,
    baseline_upper: FloatMatrix | Sequence[Sequence[float | None]] | None = None,
    baseline_label: str | None = None,
) -> SeriesBatch:
    """Validate and assemble a batch.

    Parameters
    ----------
    actuals, fitted : 2-D array or sequence of sequences
        Training observations and one-step in-sample fitted values, one row per series.
        Ragged rows are padded with ``NaN``; ``None`` means missing.
    ids : sequence of str, optional
        Series identifiers, unique. Default ``"0"``, ``"1"``, ...
    weights : sequence of float, optional
        Importance per series (``None`` or ``NaN`` entries: that series' volume). Default: the
        volume, ``sum_t max(|actual_t|, |fitted_t|)`` over the training period, so a series
        forecast at 5 that sold 0 weighs what its forecasts put at stake.
    season_length : int
        Seasonal period ``m`` (1: non-seasonal).
    model_params : int
        Number of parameters the model estimated (reduces the Ljung-Box degrees of freedom).
    holdout_actuals, holdout_forecasts : 2-D array, optional
        Out-of-sample actuals and forecasts, given together.
    holdout_lower, holdout_upper : 2-D array, optional
        Prediction interval bounds, given together, ``lower <= upper``.
    level : float or sequence, optional
        Nominal coverage of the intervals in (0, 1); default 0.95 where intervals are given.
    lengths : sequence of int, optional
        Training periods per series, gaps included. Default: up to the last observed actual or
        fitted value.
    burn_in : int or sequence of int, optional
        Periods to drop at the start of every series (or of each), default 0.
    baseline_forecasts : 2-D array, optional
        The holdout forecasts of the version this one is compared with (the ``baseline``),
        in the holdout's shape; ``None`` or ``NaN`` where a series or period has no matched
        baseline value. Needs the holdout.
    baseline_lower, baseline_upper : 2-D array, optional
        The baseline's interval bounds, given together and with ``baseline_forecasts``,
        ``lower <= upper``.
    baseline_label : str, optional
        The baseline version's name, for sentences; needs ``baseline_forecasts``.

    Raises
    ------
    InputError
        Naming the argument: shapes that disagree, infinite values, duplicate ids,
        ``season_length < 1``, ``model_params < 0``, a level outside (0, 1), lower above upper.
    """
    if isinstance(season_length, bool) or not isinstance(season_length, (int, np.integer)):
        raise InputError("season_length", "must be an integer")
    if season_length < 1:
        raise InputError("season_length", f"must be at least 1, got {season_length}")
    if isinstance(model_params, bool) or not isinstance(model_params, (int, np.integer)):
        raise InputError("model_params", "must be an integer")
    if model_params < 0:
        raise InputError("model_params", f"must be 0 or more, got {model_params}")

    a = _matrix("actuals", actuals)
    n = a.shape[0]
    f = _same_shape("fitted", _matrix("fitted", fitted, n), a, "actuals")
    if lengths is None:
        span = np.maximum(_row_lengths(a), _row_lengths(f))
    else:
        span = _per_series("lengths", lengths, n)
        if (span > a.shape[1]).any():
            raise InputError(
                "lengths", "longer than the rows given", index=int(np.argmax(span > a.shape[1]))
            )
        _check_row_lengths("actuals", a, span)
        _check_row_lengths("fitted", f, span)
    span.flags.writeable = False
    drop = _per_series("burn_in", burn_in, n)
    if drop.any():
        f = np.where(np.arange(f.shape[1])[None, :] < drop[:, None], np.nan, f)
    drop.flags.writeable = False

    if ids is None:
        id_tuple = tuple(str(i) for i in range(n))
    else:
        id_tuple = tuple(str(i) for i in ids)
        if len(id_tuple) != n:
            raise InputError("ids", f"has {len(id_tuple)} entries, expected {n}")
        if len(set(id_tuple)) != n:
            seen: set[str] = set()
            for i, s in enumerate(id_tuple):
                if s in seen:
                    raise InputError("ids", f"duplicate series id {s!r}", index=i)
                seen.add(s)

    volume = _volume(a, f)
    if weights is None:
        w = volume
        given = np.zeros(n, dtype=bool)
    else:
        w = np.array([np.nan if v is None else v for v in weights], dtype=float)
        if w.shape != (n,):
            raise InputError("weights", f"has {w.shape[0]} entries, expected {n}")
        if np.isinf(w).any() or (w < 0).any():
            bad = int(np.argmax(np.isinf(w) | (w < 0)))
            raise InputError("weights", "must be finite and non-negative", index=bad)
        given = ~np.isnan(w)
        w = np.where(given, w, volume)
    given.flags.writeable = False

    holdout = None
    if (holdout_actuals is None) != (holdout_forecasts is None):
        raise InputError(
            "holdout_forecasts" if holdout_forecasts is None else "holdout_actuals",
            "holdout actuals and forecasts must be given together",
        )
    if holdout_actuals is None and (holdout_lower is not None or holdout_upper is not None):
        raise InputError(
            "holdout_actuals", "interval bounds need the holdout actuals and forecasts"
        )
    if holdout_actuals is not None:
        ha = _matrix("holdout_actuals", holdout_actuals, n)
        hf = _same_shape(
            "holdout_forecasts",
            _matrix("holdout_forecasts", holdout_forecasts, n),
            ha,
            "holdout_actuals",
        )
        if hf.shape[1] > ha.shape[1]:
            ha = _same_shape("holdout_actuals", ha, hf, "holdout_forecasts")
        lev = None
        lo, up = _bounds_pair("holdout", holdout_lower, holdout_upper, n, ha, "holdout_actuals")
        if lo is not None and up is not None:
            has_interval = (~np.isnan(lo) & ~np.isnan(up)).any(axis=1)
            if level is None:
                lev = np.full(n, DEFAULT_LEVEL)
            elif np.ndim(cast(Any, level)) == 0:
                lev = np.full(n, float(level))  # type: ignore[arg-type]
            else:
                lev = np.array([np.nan if v is None else v for v in level], dtype=float)  # type: ignore[union-attr]
                if lev.shape != (n,):
                    raise InputError("level", f"has {lev.shape[0]} entries, expected {n}")
                lev = np.where(np.isnan(lev), DEFAULT_LEVEL, lev)
            outside = ~((lev > 0) & (lev < 1))
            if outside.any():
                i = int(np.argmax(outside))
                raise InputError(
                    "level", f"must lie strictly between 0 and 1, got {lev[i]}", index=i
                )
            lev = np.where(has_interval, lev, np.nan)
        holdout = Holdout(actuals=ha, forecasts=hf, lower=lo, upper=up, level=lev)

    baseline = _baseline(
        holdout, n, baseline_forecasts, baseline_lower, baseline_upper, baseline_label
    )
    return SeriesBatch(
        ids=id_tuple,
        actuals=a,
        fitted=f,
        weights=w,
        season_length=int(season_length),
        model_params=int(model_params),
        holdout=holdout,
        lengths=span,
        burn_in=drop,
        weights_given=given,
        baseline=baseline,
    )


def _volume(actuals: FloatMatrix, fitted: FloatMatrix) -> FloatVector:
    """``sum_t max(|actual_t|, |fitted_t|)`` per row over the values given (the default
    weight)."""
    volume = np.abs(actuals)
    np.fmax(volume, np.abs(fitted), out=volume)
    volume[np.isnan(volume)] = 0.0
    return volume.sum(axis=1)


def _bounds_pair(
    prefix: str, lower: object, upper: object, n: int, like: FloatMatrix, like_name: str
) -> tuple[FloatMatrix | None, FloatMatrix | None]:
    """Interval bounds ``{prefix}_lower``/``{prefix}_upper``, both or neither, in ``like``'s
    shape, ``lower <= upper`` wherever both are given."""
    if (lower is None) != (upper is None):
        raise InputError(
            f"{prefix}_upper" if upper is None else f"{prefix}_lower",
            "interval bounds must be given together",
        )
    if lower is None:
        return None, None
    lo = _same_shape(f"{prefix}_lower", _matrix(f"{prefix}_lower", lower, n), like, like_name)
    up = _same_shape(f"{prefix}_upper", _matrix(f"{prefix}_upper", upper, n), like, like_name)
    crossed = lo > up  # NaN compares False
    if crossed.any():
        i, j = (int(v) for v in np.argwhere(crossed)[0])
        raise InputError(
            f"{prefix}_lower", f"lower bound above upper bound at step {j + 1}", index=i
        )
    return lo, up


def _baseline(
    holdout: Holdout | None,
    n: int,
    forecasts: object,
    lower: object,
    upper: object,
    label: object,
) -> Baseline | None:
    """The validated baseline of :func:`make_batch` (``None`` when none was given)."""
    if forecasts is None:
        for name, value in (
            ("baseline_lower", lower),
            ("baseline_upper", upper),
            ("baseline_label", label),
        ):
            if value is not None:
                raise InputError(name, "needs baseline_forecasts")
        return None
    if holdout is None:
        raise InputError("baseline_forecasts", "a baseline needs the holdout actuals and forecasts")
    if label is not None and not isinstance(label, str):
        raise InputError("baseline_label", "must be a string")
    like = holdout.actuals
    bf = _same_shape(
        "baseline_forecasts",
        _matrix("baseline_forecasts", forecasts, n),
        like,
        "holdout_actuals",
    )
    lo, up = _bounds_pair("baseline", lower, upper, n, like, "holdout_actuals")
    return Baseline(forecasts=bf, lower=lo, upper=up, label=label)


def stack_key(batch: SeriesBatch) -> tuple[object, ...]:
    """What batches must share to be stacked by :func:`stack_batches`: season length, model
    parameters, the series' lengths, the shape of every matrix and where values are missing in
    each.

    With the same shape and missing values, every check does the same arithmetic on a part's
    rows stacked or alone (the same lag orders, regression rows and trimmed spans), so the
    results agree to the last bit, not merely to rounding.
    """
    h = batch.holdout
    hold: tuple[object, ...] = ()
    if h is not None:
        hold = (
            h.actuals.shape[1],
            h.lower is not None,
            h.level is not None,
            _missing(h.actuals),
            _missing(h.forecasts),
            None if h.lower is None else _missing(h.lower),
            None if h.upper is None else _missing(h.upper),
            None if h.level is None else _missing(h.level),
        )
    b = batch.baseline
    base: tuple[object, ...] = ()
    if b is not None:
        base = (
            b.label,
            _missing(b.forecasts),
            None if b.lower is None else _missing(b.lower),
            None if b.upper is None else _missing(b.upper),
        )
    return (
        batch.season_length,
        batch.model_params,
        batch.actuals.shape,
        batch.lengths.tobytes(),
        _missing(batch.actuals),
        _missing(batch.fitted),
        hold,
        base,
    )


def _missing(values: np.ndarray) -> bytes:
    return np.packbits(np.isnan(values)).tobytes()


def stack_batches(batches: Sequence[SeriesBatch]) -> SeriesBatch:
    """One batch holding the rows of ``batches`` in order. Series ids may repeat across the
    parts: the checks never read them.

    Every check works row by row, so each part's rows of the stacked batch's results are the
    part's own results; :meth:`BatchChecks.split` hands them back.
    """
    first = batches[0]
    if len(batches) == 1:
        return first
    if any(
        b.actuals.shape[1] != first.actuals.shape[1]
        or (b.season_length, b.model_params) != (first.season_length, first.model_params)
        or (b.holdout is None) != (first.holdout is None)
        or (b.baseline is None) != (first.baseline is None)
        or (
            b.baseline is not None
            and first.baseline is not None
            and (b.baseline.label, b.baseline.lower is None)
            != (first.baseline.label, first.baseline.lower is None)
        )
        for b in batches[1:]
    ):
        raise ValueError(
            "stack_batches: the batches differ in season length, model parameters, shape or "
            "baseline"
        )
    holdout = None
    if first.holdout is not None:
        parts = [b.holdout for b in batches]

        def rows(name: str) -> FloatMatrix | None:
            if getattr(first.holdout, name) is None:
                return None
            return stacked(name)

        def stacked(name: str) -> FloatMatrix:
            return np.concatenate([getattr(p, name) for p in parts])

        holdout = Holdout(
            actuals=stacked("actuals"),
            forecasts=stacked("forecasts"),
            lower=rows("lower"),
            upper=rows("upper"),
            level=rows("level"),
        )
    baseline = None
    if first.baseline is not None:
        given = [b.baseline for b in batches]

        def base_rows(name: str) -> FloatMatrix | None:
            if getattr(first.baseline, name) is None:
                return None
            return np.concatenate([getattr(g, name) for g in given])

        baseline = Baseline(
            forecasts=base_rows("forecasts"),  # type: ignore[arg-type]
            lower=base_rows("lower"),
            upper=base_rows("upper"),
            label=first.baseline.label,
        )
    return SeriesBatch(
        ids=tuple(i for b in batches for i in b.ids),
        actuals=np.concatenate([b.actuals for b in batches]),
        fitted=np.concatenate([b.fitted for b in batches]),
        weights=np.concatenate([b.weights for b in batches]),
        season_length=first.season_length,
        model_params=first.model_params,
        holdout=holdout,
        lengths=np.concatenate([b.lengths for b in batches]),
        burn_in=np.concatenate([b.burn_in for b in batches]),
        weights_given=np.concatenate([b.weights_given for b in batches]),
        baseline=baseline,
    )


@dataclass(frozen=True, eq=False)
class Residuals:
    """Residuals of a batch with the bookkeeping every check shares.

    Attributes
    ----------
    values : ndarray
        ``actual - fitted``, ``NaN`` where missing, before the span start or after the end.
    observed : ndarray of bool
        Where ``values`` is observed.
    n_obs : ndarray of int
        Observed residuals per series (the effective sample size).
    n_missing : ndarray of int
        Missing residuals inside the span (first observed residual to last observed actual).
    start : ndarray of int
        Index of the first observed residual (the length for a row with none).
    lengths : ndarray of int
        Training length per series.
    mean : ndarray
        Mean of the observed residuals (``NaN`` where ``n_obs == 0``).
    centred : ndarray
        ``values - mean`` where observed, 0 elsewhere (so sums of lagged products skip gaps).
    constant : ndarray of bool
        Observed residuals all equal within the rounding of ``actual - fitted`` (see
        :func:`nearly_constant`), including rows with fewer than 2.
    unit : ndarray
        Largest ``|centred|`` per row (1 where that is 0): the scale-free statistics work on
        ``standard = centred / unit``, so neither huge nor tiny units overflow or underflow.
    standard : ndarray
        ``centred / unit``: values in ``[-1, 1]``, 0 where not observed.
    rounding_scale : ndarray
        Largest ``|actual|`` or ``|fitted|`` over the observed residuals: the magnitude the
        rounding of ``actual - fitted`` is relative to.
    """

    values: FloatMatrix
    observed: BoolMatrix
    n_obs: IntVector
    n_missing: IntVector
    start: IntVector
    lengths: IntVector
    mean: FloatVector
    centred: FloatMatrix
    constant: np.ndarray
    unit: FloatVector
    standard: FloatMatrix
    rounding_scale: FloatVector

    def rows(self, part: slice) -> Residuals:
        """The residuals of the series in ``part`` (a slice of rows), with the per-series
        figures already computed (:meth:`memo`) for those rows."""
        out = Residuals(**{f.name: getattr(self, f.name)[part] for f in fields(Residuals)})
        memo = self.__dict__.get("_memo")
        if memo:
            out.__dict__["_memo"] = {key: values[part] for key, values in memo.items()}
        return out

    def memo(self, key: str, make: Callable[[], FloatVector]) -> FloatVector:
        """The per-series vector ``make()``, computed once for these residuals and shared by
        every check that asks for ``key`` (read-only; :meth:`rows` keeps its rows)."""
        memo: dict[str, FloatVector] = self.__dict__.setdefault("_memo", {})
        found = memo.get(key)
        if found is None:
            found = make()
            found.flags.writeable = False
            memo[key] = found
        return found

    @property
    def square_sums(self) -> tuple[FloatVector, FloatVector]:
        """``(top, sums)``: the largest observed ``|e|`` per row (0 where none) and the row sums
        of ``(e / peak)^2`` over the observed residuals, ``peak = top`` (1 where 0). Computed
        once; :func:`scaled_squares` hands them over when it has the squares anyway."""
        if "square_sums" not in self.__dict__.get("_memo", {}):
            scaled_squares(self)
        return self.memo("largest", _missing_memo), self.memo("square_sums", _missing_memo)

    @property
    def value_sums(self) -> FloatVector:
        """Per row, the sum of the observed residuals (as their mean takes it)."""
        return self.memo(
            "value_sums", lambda: np.where(self.observed, self.values, 0.0).sum(axis=1)
        )

    def autocovariances(self, max_lag: int) -> FloatMatrix:
        """``gamma[:, k]`` for ``k = 0..max_lag``: sum of lag-``k`` products of the centred
        residuals over observed pairs, divided by ``n_obs`` (shape ``(n_series, max_lag + 1)``).
        """
        with np.errstate(over="ignore", invalid="ignore"):
            return self.standard_autocovariances(max_lag) * (self.unit * self.unit)[:, None]

    def standard_autocovariances(self, max_lag: int) -> FloatMatrix:
        """:meth:`autocovariances` of ``standard`` (the centred residuals over ``unit``):
        the same numbers divided by ``unit**2``, free of overflow and underflow."""
        z = self.standard
        width = z.shape[1]
        out = np.zeros((z.shape[0], max_lag + 1))
        for k in range(0, min(max_lag, width - 1) + 1):
            out[:, k] = self.lag_products(k)
        with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
            return out / self.n_obs[:, None]

    def lag_products(self, k: int) -> FloatVector:
        """``sum_t z_t z_{t-k}`` per row of ``standard`` (``0 <= k`` below the width), one
        dot product per row, computed once for every check that asks (read-only)."""
        z = self.standard
        if k == 0:
            return self.memo("lag0", lambda: np.vecdot(z, z))
        return self.memo(f"lag{k}", lambda: np.vecdot(z[:, k:], z[:, :-k]))


def _missing_memo() -> FloatVector:
    raise AssertionError("computed by scaled_squares")


def abs_actual_sums(batch: SeriesBatch, res: Residuals) -> FloatVector:
    """Per series, the sum of ``|actual|`` over the periods with a residual (``res`` the
    residuals of ``batch``), computed once."""
    return res.memo(
        "abs_actual_sums", lambda: np.where(res.observed, np.abs(batch.actuals), 0.0).sum(axis=1)
    )


def scaled_squares(res: Residuals) -> tuple[FloatVector, FloatMatrix]:
    """``(top, squares)``: the largest observed ``|e|`` per row (0 where none) and ``(e /
    peak)^2``, ``peak = top`` (1 where 0), 0 where missing: values in ``[0, 1]``, so sums of
    them and of their products neither overflow nor underflow. A new matrix the caller may
    change; its row sums are kept as ``res.square_sums``."""
    magnitude = np.abs(np.where(res.observed, res.values, 0.0))
    top = magnitude.max(axis=1, initial=0.0)
    peak = np.where(top > 0, top, 1.0)
    np.divide(magnitude, peak[:, None], out=magnitude)
    np.multiply(magnitude, magnitude, out=magnitude)
    memo: dict[str, FloatVector] = res.__dict__.setdefault("_memo", {})
    if "square_sums" not in memo:
        sums = magnitude.sum(axis=1)
        kept = top.copy()
        kept.flags.writeable = sums.flags.writeable = False
        memo["largest"], memo["square_sums"] = kept, sums
    return top, magnitude


def nearly_constant(
    values: FloatMatrix, observed: BoolMatrix, scale: FloatVector | float = 0.0
) -> np.ndarray:
    """Per row: the observed values all equal within rounding, or fewer than 2 of them.

    "Within rounding": the range is at most ``1e-12`` times ``max(|largest|, |smallest|,
    scale)``, where ``scale`` is the magnitude the values were computed from (for residuals,
    the largest ``|actual|`` or ``|fitted|``: ``actual - fitted`` carries their rounding).
    """
    hi = np.where(observed, values, -np.inf).max(axis=1, initial=-np.inf)
    lo = np.where(observed, values, np.inf).min(axis=1, initial=np.inf)
    return constant_from_range(hi, lo, observed.sum(axis=1) >= 2, scale)


def constant_from_range(
    hi: FloatVector, lo: FloatVector, have: np.ndarray, scale: FloatVector | float
) -> np.ndarray:
    """:func:`nearly_constant` from each row's largest and smallest observed value and whether
    it has at least 2."""
    base = np.maximum(np.maximum(np.abs(hi), np.abs(lo)), scale)
    with np.errstate(invalid="ignore"):
        return ~have | ((hi - lo) <= 1e-12 * np.where(have, base, 1.0))


def residuals_of(batch: SeriesBatch) -> Residuals:
    """Compute the residuals of ``batch`` under the rules in this module's docstring."""
    e = batch.actuals - batch.fitted
    observed = np.isnan(e)
    np.logical_not(observed, out=observed)
    n_obs = observed.sum(axis=1).astype(np.int64)
    lengths = batch.lengths
    first = np.argmax(observed, axis=1) if e.shape[1] else np.zeros(e.shape[0], dtype=np.int64)
    start = np.where(n_obs > 0, first, lengths).astype(np.int64)
    n_missing = np.maximum(lengths - start, 0) - n_obs
    gone = ~observed
    centred = e.copy()
    centred[gone] = 0.0
    value_sums = centred.sum(axis=1)
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        mean = value_sums / n_obs
    mean = np.where(n_obs > 0, mean, np.nan)
    np.subtract(centred, mean[:, None], out=centred)
    centred[gone] = 0.0
    magnitude = np.abs(batch.actuals)
    np.maximum(magnitude, np.abs(batch.fitted), out=magnitude)
    magnitude[gone] = 0.0
    rounding_scale = magnitude.max(axis=1, initial=0.0)
    # The largest and smallest observed residual (max and min are exact, NaN is missing).
    hi = np.where(n_obs > 0, np.fmax.reduce(e, axis=1, initial=-np.inf), -np.inf)
    lo = np.where(n_obs > 0, np.fmin.reduce(e, axis=1, initial=np.inf), np.inf)
    constant = constant_from_range(hi, lo, n_obs >= 2, rounding_scale)
    unit = np.abs(centred).max(axis=1, initial=0.0)
    unit = np.where(unit > 0, unit, 1.0)
    standard = centred / unit[:, None]
    value_sums.flags.writeable = False
    out = Residuals(
        values=e,
        observed=observed,
        n_obs=n_obs,
        n_missing=n_missing.astype(np.int64),
        start=start,
        lengths=lengths,
        mean=mean,
        centred=centred,
        constant=constant,
        unit=unit,
        standard=standard,
        rounding_scale=rounding_scale,
    )
    out.__dict__["_memo"] = {"value_sums": value_sums}
    return out


def conform(
    batch: SeriesBatch, *, width: int, horizon: int = 0, intervals: bool = False
) -> SeriesBatch:
    """``batch`` padded to the shape of the fleet it is a chunk of: ``width`` training periods
    (missing values on the right; the series' lengths stay theirs), a holdout of ``horizon``
    steps (all missing for a chunk without one) and interval bounds (all missing where a
    series has none) when ``intervals``. A chunk's rows are then the fleet's rows, so every
    check gives them the numbers it gives them in the whole fleet.
    """
    n, have = batch.actuals.shape
    if have > width:
        raise InputError("actuals", f"has {have} periods, more than the fleet's {width}")

    def pad(values: FloatMatrix | None, to: int) -> FloatMatrix:
        out = np.full((n, to), np.nan)
        if values is not None:
            out[:, : values.shape[1]] = values
        return out

    def frozen(values: np.ndarray) -> np.ndarray:
        values.flags.writeable = False
        return values

    h = batch.holdout
    holdout = h
    given = 0 if h is None else h.actuals.shape[1]
    if given > horizon:
        raise InputError("holdout_actuals", f"has {given} steps, more than the fleet's {horizon}")
    if horizon and (h is None or given < horizon or (intervals and h.lower is None)):
        with_bounds = intervals or (h is not None and h.lower is not None)
        holdout = Holdout(
            actuals=pad(None if h is None else h.actuals, horizon),
            forecasts=pad(None if h is None else h.forecasts, horizon),
            lower=pad(None if h is None else h.lower, horizon) if with_bounds else None,
            upper=pad(None if h is None else h.upper, horizon) if with_bounds else None,
            level=(
                (np.full(n, np.nan) if h is None or h.level is None else h.level)
                if with_bounds
                else None
            ),
        )
    baseline = batch.baseline
    if baseline is not None and holdout is not h:
        baseline = Baseline(
            forecasts=pad(baseline.forecasts, horizon),
            lower=None if baseline.lower is None else pad(baseline.lower, horizon),
            upper=None if baseline.upper is None else pad(baseline.upper, horizon),
            label=baseline.label,
        )
    if have == width and holdout is h:
        return batch
    actuals, fitted, weights = batch.actuals, batch.fitted, batch.weights
    if have != width:
        actuals, fitted = pad(actuals, width), pad(fitted, width)
        # The default weight summed over the fleet's width, as the whole fleet's batch sums it.
        weights = np.where(batch.weights_given, weights, _volume(actuals, fitted))
    return SeriesBatch(
        ids=batch.ids,
        actuals=actuals,
        fitted=fitted,
        weights=weights,
        season_length=batch.season_length,
        model_params=batch.model_params,
        holdout=holdout,
        lengths=frozen(batch.lengths.copy()),
        burn_in=batch.burn_in,
        weights_given=batch.weights_given,
        baseline=baseline,
    )
