"""The report reads a series in the request's shape: the fields of service.ingest.shape, each
kept where the charts find it (a renamed or added field of the request fails here)."""

from __future__ import annotations

import numpy as np

from service.ingest import shape
from service.report import SeriesInputs

# Where SeriesInputs keeps each field of a series and of its holdout.
KEPT = {
    "id": "series_id",
    "actuals": "actuals",
    "fitted": "fitted",
    "timestamps": "timestamps",
    "burn_in": "burn_in",
    "holdout.actuals": "holdout_actuals",
    "holdout.forecasts": "holdout_forecasts",
    "holdout.lower": "holdout_lower",
    "holdout.upper": "holdout_upper",
    "holdout.level": "level",
    "holdout.timestamps": "holdout_timestamps",
}
NOT_DRAWN = {"weight"}  # weighs the series in the fleet's figures; no chart shows it


def _request_fields() -> set[str]:
    series = {f.name for f in shape.SERIES if f.kind != "holdout"}
    return series | {f"holdout.{f.name}" for f in shape.HOLDOUT}


def _value(spec: shape.FieldSpec, n: int, offset: float) -> object:
    if spec.kind == "numbers":
        return [offset + k for k in range(n)]
    if spec.kind == "strings":
        return [f"2026-{1 + int(offset) // 10:02d}-{k + 1:02d}" for k in range(n)]
    if spec.kind == "text":
        return "depot-4/sku-118"
    if spec.kind == "integer":
        return 2
    assert spec.kind == "number", spec
    return 0.8 if spec.above is not None else 2.0


def test_every_field_of_a_series_is_kept_or_known_to_be_left_out():
    assert _request_fields() == set(KEPT) | NOT_DRAWN


def test_a_series_in_the_request_shape_is_read_field_by_field():
    given: dict[str, object] = {}
    series: dict[str, object] = {}
    for k, spec in enumerate(s for s in shape.SERIES if s.kind != "holdout"):
        series[spec.name] = given[spec.name] = _value(spec, 4, 10.0 * k)
    holdout: dict[str, object] = {}
    for k, spec in enumerate(shape.HOLDOUT):
        holdout[spec.name] = given[f"holdout.{spec.name}"] = _value(spec, 2, 10.0 * k + 5)
    series["holdout"] = holdout
    inputs = SeriesInputs.from_mapping(series)
    for name, attribute in KEPT.items():
        got, sent = getattr(inputs, attribute), given[name]
        if isinstance(got, np.ndarray):
            np.testing.assert_array_equal(got, sent, err_msg=name)
        elif isinstance(got, tuple):
            assert list(got) == sent, name
        else:
            assert got == sent, name
