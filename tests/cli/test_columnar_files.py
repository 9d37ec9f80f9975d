"""``plumbline assess`` and the Python client on Parquet and Arrow files of the long layout.

The reference is the same demo request as CSV (the CSV path is checked against JSON and
statsmodels elsewhere): every columnar file must give the same assessment.
"""

from __future__ import annotations

import csv
import io
import json

import pyarrow as pa
import pyarrow.parquet as pq
import pytest
import test_against_app as against_app

from service import demo
from service.client import PlumblineClient

# The fixtures and helpers of the tests against the app in-process.
ADMIN, URL, assess, stored = (
    against_app.ADMIN,
    against_app.URL,
    against_app.assess,
    against_app.stored,
)
app, db_url, files = against_app.app, against_app.db_url, against_app.files
http, transport, _no_sleep = against_app.http, against_app.transport, against_app._no_sleep

OPTIONS = (
    "--model",
    "wrenfield-pickups-weekday",
    "--version",
    demo.VERSION,
    "--season-length",
    "7",
)


def csv_to_table(text: str) -> pa.Table:
    """The CSV long layout as a typed Arrow table (empty cells as nulls)."""
    rows = list(csv.DictReader(io.StringIO(text)))
    columns: dict[str, pa.Array] = {}
    for name in rows[0]:
        cells = [r[name] for r in rows]
        if name in ("series_id", "part", "timestamp"):
            columns[name] = pa.array([c or None for c in cells], pa.string())
        else:
            columns[name] = pa.array([float(c) if c else None for c in cells], pa.float64())
    return pa.table(columns)


def write(table: pa.Table, path, kind: str) -> None:
    if kind == "parquet":
        pq.write_table(table, path)
        return
    with pa.OSFile(str(path), "wb") as sink, pa.ipc.new_stream(sink, table.schema) as writer:
        writer.write_table(table)


@pytest.fixture
def columnar_files(files, tmp_path):
    table = csv_to_table((files / "weekday.csv").read_text())
    out = {}
    for kind, ext in (("parquet", ".parquet"), ("arrow", ".arrow")):
        path = tmp_path / f"weekday{ext}"
        write(table, path, kind)
        out[kind] = path
    return out


@pytest.mark.parametrize("kind", ["parquet", "arrow"])
def test_columnar_file_gives_the_csv_files_assessment(cli, http, files, columnar_files, kind):
    want = json.loads(
        assess(cli, http, files / "weekday.csv", "--no-store", "--json", *OPTIONS).out
    )
    run = assess(cli, http, columnar_files[kind], "--json", *OPTIONS)
    assert run.code == 0, run.err
    got = json.loads(run.out)
    assert got["id"] is not None
    for key in ("verdict", "reasons", "checks", "fleet", "series"):
        assert got[key] == want[key], key
    (row,) = stored(http)
    assert row["id"] == got["id"]


@pytest.mark.parametrize("kind", ["parquet", "arrow"])
def test_columnar_file_offline_and_with_labels(cli, http, files, columnar_files, kind):
    want = json.loads(
        assess(cli, http, files / "weekday.csv", "--no-store", "--json", *OPTIONS).out
    )
    offline = cli("assess", str(columnar_files[kind]), "--offline", "--json", *OPTIONS)
    assert offline.code == 0, offline.err
    assert json.loads(offline.out)["series"] == want["series"]
    # Labels have no query parameter: the file is read here and sent as the JSON body.
    labelled = assess(cli, http, columnar_files[kind], "--json", "--label", "run=4", *OPTIONS)
    doc = json.loads(labelled.out)
    assert doc["labels"] == {"run": "4"} and doc["series"] == want["series"]


def test_declared_format_wins_over_the_extension(cli, http, files, columnar_files, tmp_path):
    odd = tmp_path / "weekday.bin"
    odd.write_bytes(columnar_files["parquet"].read_bytes())
    run = assess(cli, http, odd, "--format", "parquet", "--no-store", *OPTIONS)
    assert run.code == 0, run.err


def test_a_bad_columnar_file_is_exit_2_naming_the_problem(cli, http, tmp_path):
    path = tmp_path / "broken.parquet"
    path.write_bytes(b"not a parquet file at all")
    run = assess(cli, http, path, *OPTIONS)
    assert run.code == 2
    assert "not a Parquet file" in run.err
    table = pa.table({"series_id": ["a", "a"], "actual": [1.0, float("inf")], "fitted": [1.0, 1.0]})
    bad = tmp_path / "inf.arrow"
    write(table, bad, "arrow")
    run = cli("assess", str(bad), "--offline", *OPTIONS)
    assert run.code == 2 and "row[1].actual" in run.err


def test_client_sends_files_by_extension_and_sizes_answers(http, files, columnar_files):
    client = PlumblineClient(URL, token=ADMIN, http=http)
    params = {"model": "wrenfield-pickups-weekday", "version": demo.VERSION, "season_length": 7}
    full = client.assess_file(columnar_files["arrow"], params=params)
    none = client.assess_file(columnar_files["parquet"], params=params, store=False, series="none")
    assert len(none.series) == 0 and none.n_series == full.n_series
    assert none.extra["series_shown"] == "none"
    assert (none.verdict, none.checks, none.fleet) == (full.verdict, full.checks, full.fleet)
    again = client.assessment(full.id, series="flagged")
    assert [s.id for s in again.series] == [s.id for s in full.series if s.verdict != "pass"]
    data = client.series_download(full.id, check="bias")
    table = pq.read_table(pa.BufferReader(data))
    assert table.column("series_id").to_pylist() == list(full.series.ids)
    assert table.column("mean_error").to_pylist() == [
        s.check("bias").details["mean_error"] for s in full.series
    ]
    with pytest.raises(ValueError, match="exactly one"):
        client.assess(csv="a", parquet=b"b")
