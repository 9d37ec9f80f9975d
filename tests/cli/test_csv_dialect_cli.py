"""The command line reads CSV files as the service does: comma, semicolon or tab between
cells, header names in any case."""

from __future__ import annotations

import json


def rows(sep: str, header: str = "series_id,timestamp,actual,fitted") -> str:
    # An invented series: 30 weekly values around 100 with small errors.
    lines = [header.replace(",", sep)]
    for k in range(30):
        actual = 100 + (k % 5)
        fitted = actual + (0.5 if k % 2 else -0.5)
        lines.append(sep.join(["till-1", f"2026-01-{1 + k:02d}", str(actual), str(fitted)]))
    return "\n".join(lines) + "\n"


def test_semicolon_and_tab_files_assess_as_the_comma_file(cli, tmp_path):
    outputs = []
    for name, sep, header in (
        ("comma.csv", ",", "series_id,timestamp,actual,fitted"),
        ("semicolon.csv", ";", "Series_ID,Timestamp,Actual,Fitted"),
        ("tab.csv", "\t", "SERIES_ID,TIMESTAMP,ACTUAL,FITTED"),
    ):
        path = tmp_path / name
        path.write_text(rows(sep, header))
        run = cli("assess", str(path), "--offline", "--model", "m", "--version", "1", "--json")
        assert run.code in (0, 1), run.err
        outputs.append(json.loads(run.out)["series"])
    assert outputs[0] == outputs[1] == outputs[2]


def test_a_header_without_the_columns_says_what_it_read(cli, tmp_path):
    path = tmp_path / "odd.csv"
    path.write_text("id|y|yhat\na|1|2\n")
    run = cli("assess", str(path), "--offline", "--model", "m", "--version", "1")
    assert run.code == 2
    assert "missing required CSV columns series_id, actual, fitted (header has: id|y|yhat)" in (
        run.err
    )
    assert "cells separated by commas, semicolons or tabs are read" in run.err
