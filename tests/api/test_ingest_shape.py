"""The parser, the OpenAPI request models and the field tables of service.ingest.shape agree."""

from __future__ import annotations

import copy

import pytest

from service.api.schemas import AssessmentBody, HoldoutBody, SeriesBody
from service.ingest import RequestInvalid, parse_json_request, shape

BODY = {
    "model": "m",
    "version": "1",
    "series": [
        {
            "id": "a",
            "actuals": [1.0, 2.0, 3.0, 4.0],
            "fitted": [None, 1.5, 2.5, 3.5],
            "holdout": {"actuals": [5.0, 6.0], "forecasts": [4.5, 5.5]},
        }
    ],
}


def _first_loc_without(path: tuple[str, ...]) -> str:
    body = copy.deepcopy(BODY)
    target = body
    for key in path[:-1]:
        target = target[key][0] if key == "series" else target[key]
    del target[path[-1]]
    with pytest.raises(RequestInvalid) as err:
        parse_json_request(body)
    return err.value.errors[0]["loc"]


@pytest.mark.parametrize(
    ("fields", "path", "loc"),
    [
        (shape.ENVELOPE, (), "{}"),
        (shape.SERIES, ("series",), "series[0].{}"),
        (shape.HOLDOUT, ("series", "holdout"), "series[0].holdout.{}"),
    ],
)
def test_a_required_field_left_out_is_named(fields, path, loc):
    for spec in fields:
        if spec.required:
            assert _first_loc_without((*path, spec.name)) == loc.format(spec.name)


@pytest.mark.parametrize(
    ("fields", "model"),
    [(shape.ENVELOPE, AssessmentBody), (shape.SERIES, SeriesBody), (shape.HOLDOUT, HoldoutBody)],
)
def test_the_openapi_models_hold_the_fields_of_the_tables(fields, model):
    schema = model.model_json_schema()
    assert list(schema["properties"]) == [f.name for f in fields]
    assert schema["required"] == [f.name for f in fields if f.required]
    assert schema["additionalProperties"] is False


def test_an_unknown_field_message_lists_the_table():
    body = copy.deepcopy(BODY)
    body["series"][0]["colour"] = "red"
    with pytest.raises(RequestInvalid) as err:
        parse_json_request(body)
    assert err.value.errors == [
        {
            "loc": "series[0].colour",
            "message": f"unknown field; expected one of {sorted(f.name for f in shape.SERIES)}",
        }
    ]
