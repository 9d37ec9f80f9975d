"""service.ingest without HTTP: the arrays it hands the core, and its error locations."""

from __future__ import annotations

import numpy as np
import pytest

from service.core import InputError, make_batch
from service.ingest import (
    RequestInvalid,
    RequestUnparseable,
    core_error_loc,
    parse_csv_request,
    parse_json_request,
)


def test_json_arrays_match_make_batch_on_the_same_lists():
    doc = {
        "model": "m",
        "version": "1",
        "season_length": 7,
        "model_params": 2,
        "series": [
            {
                "id": "a",
                "actuals": [1.0, 2.0, None, 4.0],
                "fitted": [None, 1.5, 2.5, 3.5],
                "weight": 3.0,
                "holdout": {
                    "actuals": [5.0, 6.0],
                    "forecasts": [4.5, 5.5],
                    "lower": [4.0, 5.0],
                    "upper": [6.0, 7.0],
                    "level": 0.8,
                },
            },
            {"id": "b", "actuals": [10, 11], "fitted": [9, 10]},
        ],
    }
    req = parse_json_request(doc)
    expected = make_batch(
        [[1.0, 2.0, None, 4.0], [10.0, 11.0]],
        [[None, 1.5, 2.5, 3.5], [9.0, 10.0]],
        ids=["a", "b"],
        weights=[3.0, None],
        season_length=7,
        model_params=2,
        holdout_actuals=[[5.0, 6.0], []],
        holdout_forecasts=[[4.5, 5.5], []],
        holdout_lower=[[4.0, 5.0], []],
        holdout_upper=[[6.0, 7.0], []],
        level=[0.8, None],
    )
    b = req.batch
    np.testing.assert_array_equal(b.actuals, expected.actuals)
    np.testing.assert_array_equal(b.fitted, expected.fitted)
    np.testing.assert_array_equal(b.weights, expected.weights)
    np.testing.assert_array_equal(b.holdout.actuals, expected.holdout.actuals)
    np.testing.assert_array_equal(b.holdout.lower, expected.holdout.lower)
    np.testing.assert_array_equal(b.holdout.level, expected.holdout.level)
    assert b.ids == ("a", "b") and b.season_length == 7 and b.model_params == 2
    assert req.train_lengths.tolist() == [4, 2] and req.holdout_lengths.tolist() == [2, 0]
    assert req.policy == "default" and req.labels == {}


def test_csv_groups_rows_by_series_in_first_seen_order():
    text = (
        "series_id,part,actual,fitted,lower,upper\n"
        "b,,1,,,\n"
        "a,train,5,,,\n"
        "b,train,2,1,,\n"
        "a,,6,5,,\n"
        "b,holdout,3,2,1,4\n"
    )
    req = parse_csv_request(text, {"model": "m", "version": "v", "level": "0.9"})
    assert req.ids == ("b", "a")
    np.testing.assert_array_equal(req.batch.actuals, [[1, 2], [5, 6]])
    np.testing.assert_array_equal(req.batch.fitted, [[np.nan, 1], [np.nan, 5]])
    np.testing.assert_array_equal(req.batch.holdout.forecasts, [[2], [np.nan]])
    np.testing.assert_array_equal(req.batch.holdout.level, [0.9, np.nan])


def test_csv_unknown_parameter_and_column_are_named():
    with pytest.raises(RequestInvalid) as err:
        parse_csv_request(
            "series_id,actual,fitted,colour\na,1,1,red\n",
            {"model": "m", "version": "v", "seasonality": "7"},
        )
    locs = [e["loc"] for e in err.value.errors]
    assert "seasonality" in locs and "header.colour" in locs


def test_unparseable_is_a_kind_of_invalid():
    with pytest.raises(RequestUnparseable) as err:
        parse_json_request(b"{")
    assert isinstance(err.value, RequestInvalid)
    assert err.value.errors[0]["loc"] == "body"


def test_many_problems_are_reported_together():
    doc = {
        "model": "m",
        "version": "1",
        "series": [{"id": "x", "actuals": [1, 2], "fitted": [1]} for _ in range(3)],
    }
    with pytest.raises(RequestInvalid) as err:
        parse_json_request(doc)
    locs = [e["loc"] for e in err.value.errors]
    assert locs == [
        "series[0].fitted",
        "series[1].id",
        "series[1].fitted",
        "series[2].id",
        "series[2].fitted",
    ]


@pytest.mark.parametrize(
    ("argument", "index", "loc"),
    [
        ("fitted", 3, "series[3].fitted"),
        ("level", 0, "series[0].holdout.level"),
        ("holdout_lower", 2, "series[2].holdout.lower"),
        ("ids", 1, "series[1].id"),
        ("season_length", None, "season_length"),
    ],
)
def test_core_errors_map_to_request_fields(argument, index, loc):
    assert core_error_loc(InputError(argument, "bad", index=index)) == loc
