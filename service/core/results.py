"""Frozen result types shared by every check.

A check runs over a whole batch at once and returns one :class:`CheckResult` whose arrays hold one
entry per series. Results never change after they are made: their arrays are read-only.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, field
from enum import StrEnum
from typing import Any, Literal

import numpy as np

from .types import FloatVector, ObjectVector


class Status(StrEnum):
    """Outcome of one check on one series, or of the whole fleet."""

    PASS = "pass"
    WARN = "warn"
    FAIL = "fail"
    SKIPPED = "skipped"

    @property
    def severity(self) -> int:
        """Ordering used for "worst first": fail > warn > pass > skipped."""
        return _SEVERITY[self]


_SEVERITY = {Status.SKIPPED: 0, Status.PASS: 1, Status.WARN: 2, Status.FAIL: 3}

CheckKind = Literal["test", "metric"]
"""``test``: judged by its p-value. ``metric``: judged by its statistic against thresholds."""


def _is_none(values: np.ndarray) -> np.ndarray:
    """Element-wise ``is None`` over an object array, without a Python-level loop."""
    return np.equal(values, None)


def _frozen(values: np.ndarray) -> np.ndarray:
    out = np.array(values, copy=True)
    out.setflags(write=False)
    return out


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

    def __post_init__(self) -> None:
        n = self.statistic.shape[0]
        object.__setattr__(self, "statistic", _frozen(np.asarray(self.statistic, dtype=float)))
        object.__setattr__(self, "p_value", _frozen(np.asarray(self.p_value, dtype=float)))
        reasons = np.asarray(self.skip_reason, dtype=object).reshape(n)
        # A NaN statistic (or a test's NaN p-value) with no reason is a bug in the check.
        missing = np.isnan(self.statistic) | (
            np.isnan(self.p_value) if self.kind == "test" else False
        )
        unexplained = missing & _is_none(reasons)
        if unexplained.any():
            raise AssertionError(f"{self.name}: NaN result without a skip reason")
        object.__setattr__(self, "skip_reason", _frozen(reasons))
        frozen_details = {}
        for key, values in self.details.items():
            arr = np.asarray(values)
            if arr.shape != (n,):
                raise AssertionError(f"{self.name}: detail {key!r} has shape {arr.shape}")
            frozen_details[key] = _frozen(arr)
        object.__setattr__(self, "details", frozen_details)
        object.__setattr__(self, "detail_keys", tuple(frozen_details))

    @property
    def n_series(self) -> int:
        return int(self.statistic.shape[0])

    @property
    def skipped(self) -> np.ndarray:
        """Boolean per series: ``True`` where the check did not run."""
        return ~_is_none(self.skip_reason)

    def series_details(self, i: int) -> dict[str, Any]:
        """The details of series ``i`` as plain Python values."""
        return {k: to_python(v[i]) for k, v in self.details.items()}

    def take(self, index: np.ndarray) -> CheckResult:
        """The same result restricted (and reordered) to the rows in ``index``."""
        return CheckResult(
            name=self.name,
            kind=self.kind,
            statistic=self.statistic[index],
            p_value=self.p_value[index],
            details={k: v[index] for k, v in self.details.items()},
            skip_reason=self.skip_reason[index],
            null_hypothesis=self.null_hypothesis,
        )


def skip_reasons(n: int, *conditions: tuple[np.ndarray, str]) -> ObjectVector:
    """Build a skip-reason vector: the first condition that holds for a row gives its reason."""
    reasons = np.full(n, None, dtype=object)
    for mask, reason in conditions:
        reasons[np.asarray(mask, dtype=bool) & _is_none(reasons)] = reason
    return reasons
