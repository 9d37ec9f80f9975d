"""Arrow IPC stream and Parquet uploads: the CSV upload's long layout, read with pyarrow.

A columnar upload must give the assessment the same file as CSV gives (the CSV path is the
reference here, itself tested against the JSON body and statsmodels elsewhere), and every bad
file the problem+json answer naming the column and the row.
"""

from __future__ import annotations

import io
from datetime import date, datetime, timedelta

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from service.ingest import RequestInvalid, RequestUnparseable
from service.ingest.columnar import ARROW_STREAM, PARQUET, parse_columnar_request

from .helpers import ADMIN
from .test_post_assessments import to_csv

QUERY = "model=loaves-daily&version=1&level=0.95"
PARAMS = {"model": "loaves-daily", "version": "1"}


def long_table(b: dict) -> pa.Table:
    """The rows of ``to_csv(b)`` as an Arrow table (dates as Arrow dates)."""
    cols: dict[str, list] = {k: [] for k in ("series_id", "timestamp", "actual", "fitted")}
    cols |= {"part": [], "lower": [], "upper": []}
    for s in b["series"]:
        for t, (a, f) in enumerate(zip(s["actuals"], s["fitted"], strict=True)):
            row = (s["id"], date(2024, 1, 1) + timedelta(days=t), a, f, "train", None, None)
            for k, v in zip(cols, row, strict=True):
                cols[k].append(v)
        h = s.get("holdout")
        if h:
            for t, row in enumerate(
                zip(h["actuals"], h["forecasts"], h["lower"], h["upper"], strict=True)
            ):
                a, f, lo, up = row
                day = date(2025, 1, 1) + timedelta(days=t)
                for k, v in zip(cols, (s["id"], day, a, f, "holdout", lo, up), strict=True):
                    cols[k].append(v)
    return pa.table(
        {
            "series_id": pa.array(cols["series_id"], pa.string()),
            "timestamp": pa.array(cols["timestamp"], pa.date32()),
            "actual": pa.array(cols["actual"], pa.float64()),
            "fitted": pa.array(cols["fitted"], pa.float64()),
            "part": pa.array(cols["part"], pa.string()),
            "lower": pa.array(cols["lower"], pa.float64()),
            "upper": pa.array(cols["upper"], pa.float64()),
        }
    )


def arrow_bytes(table: pa.Table) -> bytes:
    sink = pa.BufferOutputStream()
    with pa.ipc.new_stream(sink, table.schema) as writer:
        writer.write_table(table, max_chunksize=97)  # several record batches
    return sink.getvalue().to_pybytes()


def parquet_bytes(table: pa.Table) -> bytes:
    out = io.BytesIO()
    pq.write_table(table, out, row_group_size=101)
    return out.getvalue()


ENCODERS = {ARROW_STREAM: arrow_bytes, PARQUET: parquet_bytes}


def post(client, content: bytes, kind: str, query: str = QUERY):
    return client.post(
        f"/v1/assessments?{query}", content=content, headers={**ADMIN, "Content-Type": kind}
    )


def without_ids(doc: dict) -> dict:
    return {k: v for k, v in doc.items() if k not in ("id", "created_at")}


@pytest.mark.parametrize("kind", [ARROW_STREAM, PARQUET])
def test_columnar_upload_equals_the_csv_upload(client, body, kind):
    b = body(n=4, holdout=6)
    b["series"][1] = {**b["series"][1], "fitted": [None, *b["series"][1]["fitted"][1:]]}
    r_csv = client.post(
        f"/v1/assessments?{QUERY}&store=false",
        content=to_csv(b),
        headers={**ADMIN, "Content-Type": "text/csv"},
    )
    assert r_csv.status_code == 200, r_csv.text
    r = post(client, ENCODERS[kind](long_table(b)), kind)
    assert r.status_code == 201, r.text
    got, want = r.json(), r_csv.json()
    assert got["stored"] is True and got["id"]
    assert {k: v for k, v in without_ids(got).items() if k != "stored"} == {
        k: v for k, v in without_ids(want).items() if k != "stored"
    }
    # The stored inputs, timestamps included, are those of the file: the series page of the
    # report, drawn from them, is the CSV upload's.
    stored_csv = client.post(
        f"/v1/assessments?{QUERY}", content=to_csv(b), headers={**ADMIN, "Content-Type": "text/csv"}
    ).json()
    pages = [
        client.get(f"/v1/assessments/{i}/report/series/s1", headers=ADMIN)
        for i in (got["id"], stored_csv["id"])
    ]
    assert [p.status_code for p in pages] == [200, 200]
    assert pages[0].text.replace(got["id"], "ID") == pages[1].text.replace(stored_csv["id"], "ID")


def test_rows_of_a_series_need_not_be_together():
    rng = np.random.default_rng(5)
    n, t = 3, 40
    ids = np.repeat([f"k{i}" for i in range(n)], t)
    actual = rng.normal(10, 1, n * t)
    fitted = np.full(n * t, 10.0)
    together = pa.table({"series_id": ids, "actual": actual, "fitted": fitted})
    shuffle = np.argsort(np.tile(np.arange(t), n), kind="stable")  # k0 k1 k2 k0 k1 k2 ...
    apart = together.take(pa.array(shuffle))
    a = parse_columnar_request(arrow_bytes(together), "arrow", PARAMS)
    b = parse_columnar_request(arrow_bytes(apart), "arrow", PARAMS)
    assert a.ids == b.ids == ("k0", "k1", "k2")
    np.testing.assert_array_equal(a.batch.actuals, b.batch.actuals)


def test_types_a_data_frame_gives_are_read_as_csv_cells_are():
    """Integer ids and values, NaN for a missing fitted value, tz-aware timestamps, a
    dictionary-encoded id column and pandas' index column."""
    stamps = [datetime(2026, 1, 5) + timedelta(weeks=k) for k in range(30)]
    table = pa.table(
        {
            "series_id": pa.array([7] * 30, pa.int64()).dictionary_encode(),
            "timestamp": pa.array(stamps, pa.timestamp("ns", tz="UTC")),
            "actual": pa.array(list(range(30)), pa.int32()),
            "fitted": pa.array([float("nan"), *[k + 0.5 for k in range(1, 30)]]),
            "__index_level_0__": pa.array(range(30)),
        }
    )
    req = parse_columnar_request(parquet_bytes(table), "parquet", PARAMS)
    assert req.ids == ("7",)
    assert np.isnan(req.batch.fitted[0, 0]) and req.batch.actuals[0, 29] == 29.0
    assert req.timestamps[0][:2] == ["2026-01-05T00:00:00Z", "2026-01-12T00:00:00Z"]
    csv = "series_id,timestamp,actual,fitted\n" + "".join(
        f"7,{s.isoformat()}Z,{k},{'' if k == 0 else k + 0.5}\n" for k, s in enumerate(stamps)
    )
    from service.ingest import parse_csv_request

    ref = parse_csv_request(csv, PARAMS)
    np.testing.assert_array_equal(req.batch.actuals, ref.batch.actuals)
    np.testing.assert_array_equal(req.batch.fitted, ref.batch.fitted)


def table_of(**columns) -> pa.Table:
    base = {
        "series_id": pa.array(["a"] * 5 + ["b"] * 5),
        "actual": pa.array([1.0, 2, 3, 4, 5, 6, 7, 8, 9, 10]),
        "fitted": pa.array([1.5] * 10),
    }
    for k, v in columns.items():
        if v is None:
            base.pop(k)
        else:
            base[k] = v
    return pa.table(base)


def errors_of(table: pa.Table, fmt: str = "arrow") -> list[dict]:
    data = arrow_bytes(table) if fmt == "arrow" else parquet_bytes(table)
    with pytest.raises(RequestInvalid) as caught:
        parse_columnar_request(data, fmt, PARAMS)  # type: ignore[arg-type]
    return caught.value.errors


STAMPS = [f"2026-02-{d:02d}" for d in (1, 2, 3, 4, 5)]


@pytest.mark.parametrize(
    ("columns", "loc", "words"),
    [
        ({"fitted": None}, "header.fitted", "required column 'fitted' is missing"),
        ({"colour": pa.array(["x"] * 10)}, "header.colour", "unknown column"),
        ({"actual": pa.array(["1"] * 10)}, "column.actual", "must be numbers"),
        ({"series_id": pa.array([1.5] * 10)}, "column.series_id", "must be text"),
        ({"part": pa.array([1] * 10)}, "column.part", "must be text"),
        ({"timestamp": pa.array([1.0] * 10)}, "column.timestamp", "timestamp or date"),
        (
            {"series_id": pa.array(["a", "a", None, "a", "a", *["b"] * 5])},
            "row[2].series_id",
            "must not be empty",
        ),
        (
            {"series_id": pa.array(["a"] * 5 + [" "] * 5)},
            "row[5].series_id",
            "must not be empty",
        ),
        (
            {"actual": pa.array([1.0, 2, 3, float("inf"), 5, 6, 7, 8, 9, 10])},
            "row[3].actual",
            "finite number",
        ),
        (
            {"fitted": pa.array([1.5] * 8 + [1e300, 1.5])},
            "row[8].fitted",
            "beyond the accepted magnitude",
        ),
        (
            {"part": pa.array(["train"] * 9 + ["test"])},
            "row[9].part",
            "must be train or holdout, got 'test'",
        ),
        (
            {"lower": pa.array([None, 0.5, *[None] * 8], pa.float64())},
            "row[1].lower",
            "holdout rows only",
        ),
        (
            {"timestamp": pa.array([*STAMPS[:3], None, STAMPS[4], *STAMPS])},
            "row[3].timestamp",
            "must not be empty",
        ),
        (
            {"timestamp": pa.array([*STAMPS, *STAMPS[:2], "next week", *STAMPS[3:]])},
            "row[7].timestamp",
            "'next week' is not an ISO 8601",
        ),
        (
            {"timestamp": pa.array([*STAMPS, *STAMPS[:3], STAMPS[2], STAMPS[4]])},
            "row[8].timestamp",
            "series 'b': '2026-02-03' repeats '2026-02-03' on row 7",
        ),
        (
            {"timestamp": pa.array([STAMPS[1], STAMPS[0], *STAMPS[2:], *STAMPS])},
            "row[1].timestamp",
            "series 'a': '2026-02-01' is before '2026-02-02' on row 0",
        ),
        (
            {"part": pa.array(["train"] * 5 + ["holdout"] * 5)},
            "series[1].actuals",
            "has holdout rows but no train rows",
        ),
    ],
)
def test_bad_files_name_the_column_and_row(columns, loc, words):
    for fmt in ("arrow", "parquet"):
        errors = errors_of(table_of(**columns), fmt)
        assert errors[0]["loc"] == loc, errors
        assert words in errors[0]["message"], errors


def test_unsorted_arrow_timestamps_name_the_row():
    stamps = pa.array([datetime(2026, 3, d) for d in (1, 2, 3, 5, 4)] * 2, pa.timestamp("s"))
    errors = errors_of(table_of(timestamp=stamps))
    assert [e["loc"] for e in errors] == ["row[4].timestamp", "row[9].timestamp"]
    assert (
        "'2026-03-04T00:00:00' is before '2026-03-05T00:00:00' on row 3" in (errors[0]["message"])
    )


def test_every_problem_of_a_file_is_reported_at_once():
    errors = errors_of(
        table_of(
            actual=pa.array([1.0, 2, float("-inf"), 4, 5, 6, 7, 8, 9, 10]),
            part=pa.array(["train"] * 9 + ["later"]),
        )
    )
    assert {e["loc"] for e in errors} == {"row[2].actual", "row[9].part"}


def test_not_a_file_is_unparseable():
    for fmt, what in (("arrow", "not an Arrow IPC stream"), ("parquet", "not a Parquet file")):
        with pytest.raises(RequestUnparseable) as caught:
            parse_columnar_request(b"series_id,actual,fitted\na,1,1\n", fmt, PARAMS)  # type: ignore[arg-type]
        assert caught.value.errors[0]["loc"] == "body"
        assert what in caught.value.errors[0]["message"]


@pytest.mark.parametrize("kind", [ARROW_STREAM, PARQUET])
def test_http_answers_for_bad_files(client, kind):
    r = post(client, b"\x00\x01 not columnar", kind)
    assert r.status_code == 400
    assert r.headers["content-type"].startswith("application/problem+json")
    assert r.json()["errors"][0]["loc"] == "body"
    bad = table_of(actual=pa.array([1.0, 2, 3, float("nan"), 5, 6, 7, 8, 9, float("inf")]))
    r = post(client, ENCODERS[kind](bad), kind)
    assert r.status_code == 422
    assert r.json()["errors"] == [
        {"loc": "row[9].actual", "message": "must be a finite number or null, got inf"}
    ]
    r = post(client, ENCODERS[kind](table_of()), kind, query="version=1&colour=red")
    assert r.status_code == 422
    assert [e["loc"] for e in r.json()["errors"]] == ["colour"]  # as the CSV upload stops


def test_empty_file_is_422(client):
    empty = table_of().slice(0, 0)
    r = post(client, arrow_bytes(empty), ARROW_STREAM)
    assert r.status_code == 422
    assert r.json()["errors"] == [{"loc": "body", "message": "no data rows"}]


def test_series_limit_applies(make_client):
    small = make_client(max_series=1)
    r = post(small, arrow_bytes(table_of()), ARROW_STREAM)
    assert r.status_code == 422
    assert r.json()["errors"][0]["loc"] == "series"


def test_idempotent_replay_of_a_columnar_upload(client):
    data = parquet_bytes(table_of())
    headers = {**ADMIN, "Content-Type": PARQUET, "Idempotency-Key": "parquet-1"}
    first = client.post(f"/v1/assessments?{QUERY}", content=data, headers=headers)
    again = client.post(f"/v1/assessments?{QUERY}", content=data, headers=headers)
    assert first.status_code == 201 and again.status_code == 200
    assert again.headers["idempotent-replayed"] == "true"
    assert again.json() == first.json()
    other = client.post(f"/v1/assessments?{QUERY}&season_length=2", content=data, headers=headers)
    assert other.status_code == 409


def test_unknown_content_type_names_the_columnar_types(client):
    r = client.post("/v1/assessments", content=b"x", headers={**ADMIN, "Content-Type": "a/b"})
    assert r.status_code == 415
    assert ARROW_STREAM in r.json()["detail"] and PARQUET in r.json()["detail"]


LAZY_PROBE = """
import sys
from pathlib import Path
from fastapi.testclient import TestClient
from service.api.app import create_app
from service.settings import Settings

app = create_app(Settings(database_url="sqlite:///" + sys.argv[1], admin_token="t" * 20))
headers = {"Authorization": "Bearer " + "t" * 20}
with TestClient(app) as client:
    csv = "series_id,actual,fitted\\n" + "".join(f"a,{k % 5},2\\n" for k in range(30))
    r = client.post("/v1/assessments?model=m&version=1", content=csv,
                    headers={**headers, "Content-Type": "text/csv"})
    assert r.status_code == 201, r.text
    before = "pyarrow" in sys.modules
    r = client.post("/v1/assessments?model=m&version=1", content=Path(sys.argv[2]).read_bytes(),
                    headers={**headers, "Content-Type": "application/vnd.apache.arrow.stream"})
    assert r.status_code == 201, r.text
    print(f"BEFORE={before} AFTER={'pyarrow' in sys.modules}")
"""


@pytest.mark.slow  # a fresh interpreter importing the service: several seconds
def test_pyarrow_is_imported_only_when_a_columnar_body_arrives(tmp_path):
    import subprocess
    import sys
    from pathlib import Path

    data = tmp_path / "fleet.arrows"
    data.write_bytes(arrow_bytes(table_of()))
    proc = subprocess.run(
        [sys.executable, "-c", LAZY_PROBE, str(tmp_path / "lazy.db"), str(data)],
        capture_output=True,
        text=True,
        timeout=120,
        cwd=Path(__file__).resolve().parents[2],
    )
    assert proc.returncode == 0, proc.stderr[-2000:]
    assert "BEFORE=False AFTER=True" in proc.stdout
