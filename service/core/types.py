"""Array aliases and the core's own error type.

Every public function of :mod:`service.core` takes and returns arrays of these shapes: a batch is
a 2-D float array with one row per series and one column per period, ``NaN`` where a value is
missing or where a short row is padded on the right.
"""

from __future__ import annotations

from typing import TypeAlias

import numpy as np
from numpy.typing import NDArray

FloatMatrix: TypeAlias = NDArray[np.float64]
"""Shape ``(n_series, n_periods)``; ``NaN`` marks a missing value or right padding."""

FloatVector: TypeAlias = NDArray[np.float64]
"""Shape ``(n_series,)``: one number per series."""

IntVector: TypeAlias = NDArray[np.int64]
"""Shape ``(n_series,)``: one count or index per series."""

BoolVector: TypeAlias = NDArray[np.bool_]
"""Shape ``(n_series,)``: one flag per series."""

BoolMatrix: TypeAlias = NDArray[np.bool_]
"""Shape ``(n_series, n_periods)``: ``True`` where a value is observed."""

ObjectVector: TypeAlias = NDArray[np.object_]
"""Shape ``(n_series,)`` of Python objects (``None`` or a string)."""


class InputError(ValueError):
    """Bad input to the statistics core; ``argument`` names the offending argument.

    ``argument`` is a dotted path such as ``"holdout.level"`` and ``index`` the row (series)
    concerned when there is one, so outer layers can report ``series[3].holdout.level``.
    """

    def __init__(self, argument: str, message: str, *, index: int | None = None) -> None:
        self.argument = argument
        self.index = index
        self.message = message
        where = argument if index is None else f"{argument} (series {index})"
        super().__init__(f"{where}: {message}")
