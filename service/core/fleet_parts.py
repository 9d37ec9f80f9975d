"""What a fleet-level test keeps of a block of series, and how blocks combine.

A fleet-level test (the fleet bias, the pooled autocorrelation, the pooled holdout figures) is
computed in two steps: ``gather`` reads one block of :data:`BLOCK` consecutive series (their
checks and residuals) and returns a :class:`FleetPart`; ``finish`` makes the finding from the
parts of every block combined in order. A part holds

* ``rows``: values with one entry per series of the block (concatenated across blocks);
* ``sums``: per-period or per-lag sums over the block's series, of a fixed shape (the batch's
  width), added block by block in order;
* ``scaled``: sums like ``sums`` kept as ``(mantissas, binary exponent)`` so that terms near the
  largest accepted magnitude neither overflow nor lose their small neighbours; combined by
  rescaling with powers of two (exact) to the larger exponent, then adding;
* ``lows``/``highs``: smallest and largest integers (first and last periods).

The one-shot assessment and a fleet assessed in chunks (:mod:`service.core.chunked`) cut the
fleet into the same blocks (rows ``0..BLOCK-1``, ``BLOCK..2 BLOCK-1``, ...) and combine their
parts in the same order with :func:`combine`, so every fleet statistic is the same to the last
bit whatever the chunks were: floating-point addition is not associative, so the order of the
cross-sectional sums is fixed here rather than left to the size of the input.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field

import numpy as np

from .results import compact_array, join_arrays

BLOCK = 1024
"""Series per block of a fleet-level test's sums (a chunk of a chunked assessment holds a
whole number of blocks, except the last)."""


@dataclass(frozen=True, eq=False)
class FleetPart:
    """One block's (or several blocks' combined) share of a fleet-level test; see the module
    docstring."""

    rows: Mapping[str, np.ndarray] = field(default_factory=dict)
    sums: Mapping[str, np.ndarray] = field(default_factory=dict)
    scaled: Mapping[str, tuple[np.ndarray, int]] = field(default_factory=dict)
    lows: Mapping[str, int] = field(default_factory=dict)
    highs: Mapping[str, int] = field(default_factory=dict)


EMPTY_PART = FleetPart()


def block_exponent(mantissa: np.ndarray, exponent: np.ndarray) -> tuple[np.ndarray, int]:
    """Coefficients ``mantissa 2^(exponent - E)`` with ``E = max(exponent)`` (0 when empty):
    the terms of a scaled sum in units of ``2^E``."""
    if exponent.size == 0:
        return mantissa.astype(float), 0
    top = int(exponent.max())
    return np.ldexp(mantissa, (exponent - top).astype(np.int32)), top


def _add_scaled(
    a: tuple[np.ndarray, int] | None, b: tuple[np.ndarray, int]
) -> tuple[np.ndarray, int]:
    if a is None:
        return b
    (va, ea), (vb, eb) = a, b
    top = max(ea, eb)
    return np.ldexp(va, ea - top) + np.ldexp(vb, eb - top), top


def combine(parts: Sequence[FleetPart]) -> FleetPart:
    """The parts of consecutive blocks as one, in order: rows concatenated, sums added left to
    right (a key a part lacks adds nothing), scaled sums rescaled and added, lows and highs
    the smallest and largest."""
    if len(parts) == 1:
        return parts[0]
    acc = Accumulator()
    for part in parts:
        acc.add(part)
    return acc.result()


class Accumulator:
    """:func:`combine` one part at a time (what a chunked assessment keeps across chunks)."""

    def __init__(self) -> None:
        self._rows: dict[str, list[np.ndarray]] = {}
        self._sums: dict[str, np.ndarray] = {}
        self._scaled: dict[str, tuple[np.ndarray, int]] = {}
        self._lows: dict[str, int] = {}
        self._highs: dict[str, int] = {}

    def add(self, part: FleetPart) -> None:
        for key, values in part.rows.items():
            self._rows.setdefault(key, []).append(compact_array(values))
        for key, values in part.sums.items():
            have = self._sums.get(key)
            self._sums[key] = values if have is None else have + values
        for key, pair in part.scaled.items():
            self._scaled[key] = _add_scaled(self._scaled.get(key), pair)
        for key, low in part.lows.items():
            self._lows[key] = min(low, self._lows.get(key, low))
        for key, high in part.highs.items():
            self._highs[key] = max(high, self._highs.get(key, high))

    def result(self) -> FleetPart:
        return FleetPart(
            rows={k: join_arrays(v) for k, v in self._rows.items()},
            sums=dict(self._sums),
            scaled=dict(self._scaled),
            lows=dict(self._lows),
            highs=dict(self._highs),
        )
