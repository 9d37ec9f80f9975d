"""Bad input and usage: one clear line on stderr naming the problem, exit 2, no traceback."""

from __future__ import annotations

import json

import pytest
from cli_helpers import SMALL_BODY


def one_line_error(run, *needles):
    assert run.code == 2, (run.code, run.err)
    assert run.out == ""
    lines = run.err.strip().splitlines()
    assert len(lines) == 1, run.err
    assert "Traceback" not in run.err
    for needle in needles:
        assert needle in lines[0], lines[0]
    return lines[0]


def test_missing_file(cli, tmp_path):
    path = tmp_path / "nope.json"
    line = one_line_error(cli("assess", str(path), "--offline"), "file not found", str(path))
    assert line.startswith("plumbline: error: ")


def test_directory_instead_of_file(cli, tmp_path):
    one_line_error(cli("assess", str(tmp_path), "--offline"), "is a directory")


def test_unreadable_json_names_line_and_column(cli, tmp_path):
    path = tmp_path / "broken.json"
    path.write_text('{"model": "m",\n "series": [1, 2,]}')
    one_line_error(
        cli("assess", str(path), "--offline"), "broken.json: not valid JSON", "line 2, column"
    )


def test_json_that_is_not_an_object(cli, tmp_path):
    path = tmp_path / "list.json"
    path.write_text("[1, 2]")
    one_line_error(cli("assess", str(path), "--offline"), "expected a JSON object", "an array")


def test_empty_file(cli, tmp_path):
    path = tmp_path / "empty.json"
    path.write_text("")
    one_line_error(cli("assess", str(path), "--offline"), "empty file")


def test_not_utf8(cli, tmp_path):
    path = tmp_path / "latin1.csv"
    path.write_bytes("series_id,actual,fitted\nM\xfcnchen,1,2\n".encode("latin-1"))
    one_line_error(cli("assess", str(path), "--offline"), "not UTF-8")


def test_csv_missing_columns(cli, tmp_path):
    path = tmp_path / "short.csv"
    path.write_text("series_id,actual\na,1\n")
    one_line_error(
        cli("assess", str(path), "--offline"),
        "short.csv: missing required CSV column fitted (header has: series_id, actual)",
    )


def test_csv_detected_by_content_without_extension(cli, tmp_path):
    path = tmp_path / "data"
    path.write_text("id,value\na,1\n")
    one_line_error(
        cli("assess", str(path), "--offline"),
        "missing required CSV columns series_id, actual, fitted",
    )


def test_empty_csv(cli, tmp_path):
    path = tmp_path / "empty.csv"
    path.write_text("\n\n")
    one_line_error(cli("assess", str(path), "--offline"), "empty file", "series_id")


def test_nan_in_json_is_refused_before_sending(cli, tmp_path):
    path = tmp_path / "nan.json"
    path.write_text(
        '{"model": "m", "version": "1", "series": [{"id": "a", '
        '"actuals": [NaN, 1], "fitted": [1, 1]}]}'
    )
    one_line_error(cli("assess", str(path), "--server", "http://127.0.0.1:9"), "NaN", "null")


@pytest.mark.parametrize(
    ("argv", "needle"),
    [
        (["assess"], "the following arguments are required: FILE"),
        (["assess", "x.json", "--colour"], "unrecognized arguments: --colour"),
        (["assess", "x.json", "--fail-on", "never"], "argument --fail-on: invalid choice"),
        (["assess", "x.json", "--season-length", "0"], "--season-length: must be >= 1, got 0"),
        (["assess", "x.json", "--model-params", "two"], "expected an integer, got 'two'"),
        (["assess", "x.json", "--level", "95"], "--level: must be between 0 and 1"),
        (["frobnicate"], "invalid choice: 'frobnicate'"),
        ([], "the following arguments are required: COMMAND"),
        (["verdict", "m", "--require", "fail"], "argument --require: invalid choice"),
        (["tokens", "create", "--label", "ci"], "the following arguments are required: --scope"),
        (["tokens", "create", "--scope", "root", "--label", "x"], "invalid choice: 'root'"),
        (["serve", "--port", "-1"], "--port: must be >= 1"),
    ],
)
def test_usage_errors_are_one_line_exit_2(cli, argv, needle):
    line = one_line_error(cli(*argv), needle)
    assert line.startswith("plumbline")
    assert "--help" in line


def test_no_server_configured(cli, body_file):
    one_line_error(
        cli("assess", str(body_file)),
        "no server to assess against",
        "PLUMBLINE_SERVER",
        "--offline",
    )


def test_offline_and_server_exclude_each_other(cli, body_file):
    one_line_error(
        cli("assess", str(body_file), "--offline", "--server", "http://127.0.0.1:9"),
        "--offline and --server",
    )


@pytest.mark.parametrize("url", ["localhost:8000", "ftp://host/x"])
def test_bad_server_url(cli, body_file, url):
    one_line_error(cli("assess", str(body_file), "--server", url), "--server", "http://host:port")


def test_level_with_json_input(cli, body_file):
    one_line_error(
        cli("assess", str(body_file), "--offline", "--level", "0.9"), "--level applies to CSV input"
    )


def test_bad_label(cli, body_file):
    one_line_error(
        cli("assess", str(body_file), "--offline", "--label", "nokey"), "--label expects KEY=VALUE"
    )


def test_missing_policy_file(cli, body_file, tmp_path):
    one_line_error(
        cli("assess", str(body_file), "--offline", "--policy", str(tmp_path / "strict.json")),
        "file not found",
        "strict.json",
    )


def test_policy_file_not_json(cli, body_file, tmp_path):
    path = tmp_path / "policy.json"
    path.write_text("checks: {}")
    one_line_error(
        cli("assess", str(body_file), "--offline", "--policy", str(path)),
        "policy file",
        "not valid JSON",
    )


def test_policy_file_not_an_object(cli, body_file, tmp_path):
    path = tmp_path / "policy.json"
    path.write_text(json.dumps(["bias"]))
    one_line_error(
        cli("assess", str(body_file), "--offline", "--policy", str(path)),
        "policy file",
        "expected a JSON object, got an array",
    )


def test_labels_in_file_must_be_an_object(cli, tmp_path):
    path = tmp_path / "req.json"
    path.write_text(json.dumps({**SMALL_BODY, "labels": ["a"]}))
    one_line_error(
        cli("assess", str(path), "--offline", "--label", "a=b"), "'labels' is not an object"
    )


def test_help_exits_0(cli):
    run = cli("--help")
    assert run.code == 0 and "Exit codes: 0 the gate passes" in run.out
    run = cli("assess", "--help")
    assert run.code == 0 and "--fail-on" in run.out
