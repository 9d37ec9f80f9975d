"""CSV uploads as spreadsheets and databases write them, and errors that stay short.

Delimiters (comma, semicolon, tab) and header names in any case give the request a
comma-separated, lower-case file gives; rows out of period order are sorted by timestamp; every
error quotes at most a short prefix of the input.
"""

from __future__ import annotations

import json

import numpy as np
import pytest

from service.ingest import RequestInvalid, parse_csv_request, parse_json_request

from .helpers import ADMIN

PARAMS = {"model": "m", "version": "1"}
ROWS = [
    ("a", "2026-01-05", "10", "9.5", "train"),
    ("a", "2026-01-12", "11", "", "train"),
    ("a", "2026-01-19", "12.25", "11.5", "train"),
    ("b", "2026-01-05", "3", "2.5", "train"),
    ("b", "2026-01-12", "4", "4.5", "train"),
    ("a", "2026-01-26", "13", "12", "holdout"),
    ("a", "2026-02-02", "14", "12.5", "holdout"),
]
HEADER = ("series_id", "timestamp", "actual", "fitted", "part")


def csv_text(rows=ROWS, header=HEADER, sep=",") -> str:
    return "\n".join(sep.join(r) for r in [header, *rows]) + "\n"


def same_request(a, b) -> None:
    assert a.ids == b.ids
    np.testing.assert_array_equal(a.batch.actuals, b.batch.actuals)
    np.testing.assert_array_equal(a.batch.fitted, b.batch.fitted)
    np.testing.assert_array_equal(a.batch.holdout.actuals, b.batch.holdout.actuals)
    np.testing.assert_array_equal(a.batch.holdout.forecasts, b.batch.holdout.forecasts)
    assert a.timestamps == b.timestamps
    assert a.holdout_timestamps == b.holdout_timestamps


@pytest.mark.parametrize("sep", [";", "\t"])
def test_semicolon_and_tab_files_read_as_the_comma_file(sep):
    same_request(
        parse_csv_request(csv_text(sep=sep), PARAMS), parse_csv_request(csv_text(), PARAMS)
    )


def test_header_names_in_any_case():
    header = ("Series_ID", "TimeStamp", "ACTUAL", "Fitted", "Part")
    same_request(
        parse_csv_request(csv_text(header=header, sep=";"), PARAMS),
        parse_csv_request(csv_text(), PARAMS),
    )


def test_a_name_twice_in_two_cases_is_refused():
    text = "series_id,actual,fitted,Actual\na,1,2,3\n"
    with pytest.raises(RequestInvalid) as info:
        parse_csv_request(text, PARAMS)
    assert info.value.errors == [
        {
            "loc": "header",
            "message": "a column name appears twice (names are read in any case): 'actual'",
        }
    ]


def test_rows_out_of_period_order_are_sorted_by_timestamp():
    shuffled = [ROWS[i] for i in (6, 2, 4, 0, 5, 3, 1)]
    got = parse_csv_request(csv_text(shuffled), PARAMS)
    # Series in the order of their first rows ('a' first here too), rows by timestamp.
    same_request(got, parse_csv_request(csv_text(), PARAMS))
    np.testing.assert_array_equal(got.batch.actuals[0], [10.0, 11.0, 12.25])
    np.testing.assert_array_equal(got.batch.fitted[0], [9.5, np.nan, 11.5])
    assert got.holdout_timestamps[0] == ["2026-01-26", "2026-02-02"]


def test_two_rows_at_one_timestamp_are_named():
    rows = [*ROWS[:3], ("a", "2026-01-12", "99", "98", "train")]
    with pytest.raises(RequestInvalid) as info:
        parse_csv_request(csv_text(rows), PARAMS)
    assert info.value.errors == [
        {
            "loc": "series[0].timestamps",
            "message": "series 'a' has two rows at '2026-01-12': one row per series and period",
        }
    ]


def test_without_timestamps_the_file_order_stays():
    text = "series_id,actual,fitted\na,3,2\na,1,1\n"
    got = parse_csv_request(text, PARAMS)
    np.testing.assert_array_equal(got.batch.actuals[0], [3.0, 1.0])


def test_an_empty_id_reads_properly():
    text = "series_id,actual,fitted\na,1,2\n,1,2\n"
    with pytest.raises(RequestInvalid) as info:
        parse_csv_request(text, PARAMS)
    assert info.value.errors == [
        {
            "loc": "line[3].series_id",
            "message": "must be a non-empty string, got an empty string at data row 2",
        }
    ]
    doc = {"model": "m", "version": "1", "series": [{"id": "", "actuals": [1], "fitted": [1]}]}
    with pytest.raises(RequestInvalid) as info:
        parse_json_request(doc)
    assert info.value.errors[0] == {
        "loc": "series[0].id",
        "message": "must be a non-empty string, got an empty string",
    }


def test_a_decimal_comma_gets_a_hint():
    with pytest.raises(RequestInvalid) as info:
        parse_csv_request("series_id;actual;fitted\na;1,5;2\n", PARAMS)
    assert info.value.errors == [
        {
            "loc": "line[2].actual",
            "message": "must be a finite number or empty, got '1,5' (a decimal comma? write "
            "numbers with a point, e.g. 12.5)",
        }
    ]


def test_a_missing_column_says_what_the_header_was_read_as():
    with pytest.raises(RequestInvalid) as info:
        parse_csv_request("series_id|actual|fitted\na|1|2\n", PARAMS)
    first = info.value.errors[0]
    assert first["loc"] == "header.series_id"
    assert first["message"] == (
        "required column 'series_id' is missing (the header read as 1 cell separated by "
        "commas: 'series_id|actual|fitted' (a semicolon or tab was tried as well))"
    )


def big_json_body() -> bytes:
    """About 65 KB of a JSON assessment body (invented numbers)."""
    series = [
        {"id": f"shop-{i}", "actuals": [100 + k for k in range(150)], "fitted": [99.5] * 150}
        for i in range(40)
    ]
    body = json.dumps({"model": "m", "version": "1", "series": series}).encode()
    assert 60_000 < len(body) < 70_000
    return body


def test_a_json_body_sent_as_csv_gives_a_short_error(client):
    body = big_json_body()
    r = client.post(
        "/v1/assessments",
        content=body,
        headers={**ADMIN, "Content-Type": "text/csv"},
        params={"model": "m", "version": "1"},
    )
    assert r.status_code == 422
    assert len(r.content) < 4_000, len(r.content)  # was 280 KB: the header copied 3 times
    problem = r.json()
    assert "looks like JSON: send it with Content-Type application/json" in problem["detail"]
    for e in problem["errors"]:
        assert len(e["loc"]) <= 60 and len(e["message"]) <= 600, e


def test_every_problem_body_is_bounded(client):
    # An unknown top-level field whose name is 50,000 characters long.
    doc = {"model": "m", "version": "1", "x" * 50_000: 1, "series": []}
    r = client.post("/v1/assessments", json=doc, headers=ADMIN)
    assert r.status_code == 422
    assert len(r.content) < 4_000, len(r.content)
