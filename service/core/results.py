"""Frozen result types shared by every check.

A check runs over a whole batch at once and returns one :class:`CheckResult` whose arrays hold one
entry per series. Results never change after they are made: their arrays are read-only.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any, Literal

import numpy as np

# The statuses of the assessment result (service/results/, free of numpy), used here too.
from service.results import Status as Status

from .types import FloatVector, ObjectVector

CheckKind = Literal["test", "metric"]
"""``test``: judged by its p-value. ``metric``: judged by its statistic against thresholds."""


NONE = np.array(None, dtype=object)
"""``None`` as a 0-d object array: the typed stand-in for ``None`` in ``np.where``/``np.equal``."""


def is_none(values: np.ndarray) -> np.ndarray:
    """Element-wise ``is None`` over an object array, without a Python-level loop."""
    return np.equal(values, NONE)


def to_python(value: Any) -> Any:
    """Convert a numpy scalar to a plain Python value; non-finite floats become ``None``."""
    if isinstance(value, np.generic):
        value = value.item()
    if isinstance(value, float) and not math.isfinite(value):
        return None
    return value


@dataclass(frozen=True, eq=False)
class CheckResult:
    """One check over a batch: arrays of length ``n_series``.

    Attributes
    ----------
    name : str
        The check's name, as in the API (``ljung_box``...).
    kind : {"test", "metric"}
        Tests carry a p-value; metrics carry only their statistic (MASE, skill...).
    statistic : ndarray
        The statistic per series, ``NaN`` where the check was skipped.
    p_value : ndarray
        Upper-tail p-value per series (from ``sf``), ``NaN`` for metrics and skipped series.
    details : mapping of str to ndarray
        Effective parameters and side quantities, one array per key (``lags``, ``df``...).
    skip_reason : ndarray of object
        ``None`` where the check ran, else the reason in words. A skipped series is never a pass.
    null_hypothesis : str
        What the test assumes, in words ("" for metrics).
    """

    name: str
    kind: CheckKind
    statistic: FloatVector
    p_value: FloatVector
    details: Mapping[str, np.ndarray]
    skip_reason: ObjectVector
    null_hypothesis: str = ""
    detail_keys: tuple[str, ...] = field(default=())
    _skipped: np.ndarray = field(init=False, repr=False, compare=False)

    def __post_init__(self) -> None:
        # Each array is copied once (``np.array`` copies) and the copy made read-only.
        statistic = np.array(self.statistic, dtype=float)
        n = statistic.shape[0]
        p_value = np.array(self.p_value, dtype=float)
        reasons = np.array(self.skip_reason, dtype=object).reshape(n)
        ran = is_none(reasons)
        # A NaN statistic (or a test's NaN p-value) with no reason is a bug in the check.
        missing = np.isnan(statistic)
        if self.kind == "test":
            missing |= np.isnan(p_value)
        if (missing & ran).any():
            raise AssertionError(f"{self.name}: NaN result without a skip reason")
        skipped = ~ran
        for arr in (statistic, p_value, reasons, skipped):
            arr.flags.writeable = False
        frozen_details = {}
        for key, values in self.details.items():
            arr = np.array(values)
            if arr.shape != (n,):
                raise AssertionError(f"{self.name}: detail {key!r} has shape {arr.shape}")
            arr.flags.writeable = False
            frozen_details[key] = arr
        object.__setattr__(self, "statistic", statistic)
        object.__setattr__(self, "p_value", p_value)
        object.__setattr__(self, "skip_reason", reasons)
        object.__setattr__(self, "details", frozen_details)
        object.__setattr__(self, "detail_keys", tuple(frozen_details))
        # Derived from skip_reason once; read-only like the rest.
        object.__setattr__(self, "_skipped", skipped)

    @property
    def n_series(self) -> int:
        return int(self.statistic.shape[0])

    @property
    def skipped(self) -> np.ndarray:
        """Boolean per series: ``True`` where the check did not run (read-only)."""
        return self._skipped

    def series_details(self, i: int) -> dict[str, Any]:
        """The details of series ``i`` as plain Python values."""
        return {k: to_python(v[i]) for k, v in self.details.items()}

    def rows(self, part: slice) -> CheckResult:
        """The same result for the series in ``part`` (a slice of rows): read-only views of
        arrays this result already checked, so nothing is copied or checked again."""
        out = object.__new__(CheckResult)
        for name, value in (
            ("name", self.name),
            ("kind", self.kind),
            ("statistic", self.statistic[part]),
            ("p_value", self.p_value[part]),
            ("details", {k: v[part] for k, v in self.details.items()}),
            ("skip_reason", self.skip_reason[part]),
            ("null_hypothesis", self.null_hypothesis),
            ("detail_keys", self.detail_keys),
            ("_skipped", self._skipped[part]),
        ):
            object.__setattr__(out, name, value)
        return out


def is_constant(arrays: list[np.ndarray]) -> bool:
    """Every entry of every array is the first entry of the first, bit for bit (same dtype)."""
    head = arrays[0]
    if head.size == 0 or any(a.dtype != head.dtype for a in arrays):
        return False
    if head.dtype.kind == "O":
        value = head[0]
        return all(
            all(type(x) is type(value) and (x is value or x == value) for x in a.tolist())
            for a in arrays
        )
    if head.dtype.kind in "fiub" and head.dtype.itemsize in (1, 8):
        as_bits = np.uint8 if head.dtype.itemsize == 1 else np.uint64
        value = head[:1].view(as_bits)[0]
        return all(bool((a.view(as_bits) == value).all()) for a in arrays)
    return False


def _joined(arrays: list[np.ndarray]) -> np.ndarray:
    """The arrays end to end, read-only; arrays holding one value throughout give a broadcast
    view of it (no memory per series: a fleet of a million series whose holdout checks all
    skipped holds their columns as one value each)."""
    total = sum(a.shape[0] for a in arrays)
    if is_constant(arrays):
        return np.broadcast_to(arrays[0][:1].copy(), (total,))
    out = np.concatenate(arrays)
    out.flags.writeable = False
    return out


def compact_array(values: np.ndarray) -> np.ndarray:
    """``values`` itself, or a read-only broadcast view of its one value when every entry is
    that value (bit for bit): the same numbers in no memory per series. A view of a larger
    array is copied, so that what is kept does not keep the larger array alive."""
    if values.ndim != 1 or values.strides == (0,):
        return values
    if is_constant([values]):
        return np.broadcast_to(values[:1].copy(), values.shape)
    base = values.base
    if base is not None and getattr(base, "nbytes", 0) > values.nbytes:
        values = values.copy()
        values.flags.writeable = False
    return values


def join_arrays(arrays: Sequence[np.ndarray]) -> np.ndarray:
    """The arrays end to end, read-only (a broadcast view when they hold one value)."""
    return _joined(list(arrays))


def skip_reasons_and_ran(
    n: int, *conditions: tuple[np.ndarray, str]
) -> tuple[ObjectVector, np.ndarray]:
    """Build a skip-reason vector (the first condition that holds for a row gives its reason)
    and, beside it, the boolean vector of the rows that ran (no condition holds)."""
    if not conditions:
        return np.full(n, None, dtype=object), np.ones(n, dtype=bool)
    masks = np.empty((len(conditions), n), dtype=bool)
    for k, (mask, _) in enumerate(conditions):
        masks[k] = mask
    hit = np.logical_or.reduce(masks, axis=0)
    # One entry per condition, then None for the rows no condition holds for.
    table = np.array([reason for _, reason in conditions] + [None], dtype=object)
    return table[np.where(hit, masks.argmax(axis=0), len(conditions))], ~hit
