"""The inputs of one series, as stored with an assessment, for redrawing its charts."""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from service.core.types import FloatVector


class ReportInputError(ValueError):
    """Stored inputs that cannot be drawn; ``field`` names the offending field."""

    def __init__(self, field: str, message: str) -> None:
        self.field = field
        self.message = message
        super().__init__(f"{field}: {message}")


def _vector(field: str, values: Sequence[float | None] | None) -> FloatVector | None:
    if values is None:
        return None
    if isinstance(values, (str, bytes)) or not isinstance(values, (Sequence, np.ndarray)):
        raise ReportInputError(field, "must be a list of numbers")
    try:
        arr = np.array([np.nan if v is None else float(v) for v in values], dtype=float)
    except (TypeError, ValueError) as exc:
        raise ReportInputError(field, "must be a list of numbers or nulls") from exc
    arr.setflags(write=False)
    return arr


@dataclass(frozen=True, eq=False)
class SeriesInputs:
    """One series' arrays: the training part and, optionally, the holdout.

    ``timestamps`` label the training periods (ISO dates draw a date axis; anything else falls
    back to period numbers); ``holdout_timestamps`` the holdout steps, which otherwise follow
    the last training period at its usual spacing. ``burn_in`` periods at the start were left
    out of the checks, and are left out of the residual charts the same way.
    """

    series_id: str
    actuals: FloatVector
    fitted: FloatVector
    timestamps: tuple[str, ...] | None = None
    holdout_actuals: FloatVector | None = None
    holdout_forecasts: FloatVector | None = None
    holdout_lower: FloatVector | None = None
    holdout_upper: FloatVector | None = None
    level: float | None = None
    holdout_timestamps: tuple[str, ...] | None = None
    baseline_forecasts: FloatVector | None = None
    """The baseline version's forecasts on this holdout's periods (``NaN`` where it has
    none), when the assessment was compared with one."""
    baseline_label: str | None = None
    """The baseline's version."""
    burn_in: int = 0
    """Periods dropped at the start before any check (their fitted values count as missing)."""

    @property
    def has_holdout(self) -> bool:
        return self.holdout_actuals is not None and self.holdout_actuals.size > 0

    @property
    def has_interval(self) -> bool:
        return (
            self.has_holdout
            and self.holdout_lower is not None
            and self.holdout_upper is not None
            and bool((~np.isnan(self.holdout_lower) & ~np.isnan(self.holdout_upper)).any())
        )

    @classmethod
    def from_mapping(cls, data: Mapping[str, Any]) -> SeriesInputs:
        """Build from the request body's shape of one series (``id``, ``actuals``, ``fitted``,
        ``timestamps``, ``burn_in``, ``holdout: {actuals, forecasts, lower, upper, level,
        timestamps}``), as
        ``service.ingest.shape`` defines it (a test checks the two agree)."""
        if not isinstance(data, Mapping):
            raise ReportInputError("series", "must be an object")
        if "id" not in data:
            raise ReportInputError("id", "is missing")
        actuals = _vector("actuals", data.get("actuals"))
        fitted = _vector("fitted", data.get("fitted"))
        if actuals is None:
            raise ReportInputError("actuals", "is missing")
        if fitted is None:
            raise ReportInputError("fitted", "is missing")
        if fitted.shape != actuals.shape:
            raise ReportInputError(
                "fitted", f"has {fitted.size} values, actuals has {actuals.size}"
            )
        stamps = data.get("timestamps")
        if stamps is not None:
            stamps = tuple(str(s) for s in stamps)
            if len(stamps) != actuals.size:
                raise ReportInputError(
                    "timestamps", f"has {len(stamps)} values, actuals has {actuals.size}"
                )
        burn_in = data.get("burn_in") or 0
        if isinstance(burn_in, bool) or not isinstance(burn_in, int) or burn_in < 0:
            raise ReportInputError("burn_in", "must be an integer >= 0")
        hold = data.get("holdout") or None
        ha = hf = lo = up = None
        level = None
        hold_stamps = None
        if hold is not None:
            if not isinstance(hold, Mapping):
                raise ReportInputError("holdout", "must be an object")
            ha = _vector("holdout.actuals", hold.get("actuals"))
            hf = _vector("holdout.forecasts", hold.get("forecasts"))
            if (ha is None) != (hf is None):
                raise ReportInputError("holdout", "actuals and forecasts must be given together")
            lo = _vector("holdout.lower", hold.get("lower"))
            up = _vector("holdout.upper", hold.get("upper"))
            if ha is not None and hf is not None:
                for name, arr in (("forecasts", hf), ("lower", lo), ("upper", up)):
                    if arr is not None and arr.size != ha.size:
                        raise ReportInputError(
                            f"holdout.{name}", f"has {arr.size} values, actuals has {ha.size}"
                        )
            if hold.get("level") is not None:
                level = float(hold["level"])
            if hold.get("timestamps") is not None:
                hold_stamps = tuple(str(v) for v in hold["timestamps"])
                if ha is None or len(hold_stamps) != ha.size:
                    raise ReportInputError(
                        "holdout.timestamps", "needs one value per holdout actual"
                    )
        return cls(
            series_id=str(data["id"]),
            actuals=actuals,
            fitted=fitted,
            timestamps=stamps,
            holdout_actuals=ha,
            holdout_forecasts=hf,
            holdout_lower=lo,
            holdout_upper=up,
            level=level,
            holdout_timestamps=hold_stamps,
            burn_in=burn_in,
        )
