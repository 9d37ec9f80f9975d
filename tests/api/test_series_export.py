"""``GET /v1/assessments/{id}/series``: JSON pages, CSV, Arrow IPC and Parquet downloads.

Every format must hold the figures of the stored assessment's own answer (``GET
/v1/assessments/{id}``, whose statistics are tested against statsmodels elsewhere), row for
row; downloads are read back with pyarrow and the csv module.
"""

from __future__ import annotations

import csv
import io
import math

import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from service.api.series_export import DETAIL_COLUMNS, ROW_COLUMNS
from service.core.registry import all_checks

from .helpers import ADMIN

ARROW = "application/vnd.apache.arrow.stream"
PARQUET = "application/vnd.apache.parquet"


@pytest.fixture
def stored(client, body):
    b = body(n=5, holdout=6)
    flawed = body(n=2, bias=2.5)["series"]
    for k, s in enumerate(flawed):
        s["id"] = f"biased-{k}"
        s["holdout"] = b["series"][0]["holdout"]
    b["series"] += flawed
    doc = client.post("/v1/assessments", json=b, headers=ADMIN).json()
    return doc


def expected_rows(doc: dict, check: str | None = None, status: str | None = None) -> list[dict]:
    out = []
    for s in doc["series"]:
        for c in s["checks"]:
            if (check is None or c["name"] == check) and (status is None or c["status"] == status):
                out.append({"series": s, "check": c})
    return out


def read_table(content: bytes, kind: str) -> pa.Table:
    if kind == ARROW:
        return pa.ipc.open_stream(pa.BufferReader(content)).read_all()
    return pq.read_table(pa.BufferReader(content))


def same(a, b) -> bool:
    if a is None or b is None:
        return a is None and b is None
    if isinstance(a, float) or isinstance(b, float):
        return math.isclose(a, b, rel_tol=0, abs_tol=0) or a == b
    return a == b


@pytest.mark.parametrize("kind", [ARROW, PARQUET])
def test_columnar_downloads_hold_every_row_with_flat_details(client, stored, kind):
    r = client.get(f"/v1/assessments/{stored['id']}/series", headers={**ADMIN, "Accept": kind})
    assert r.status_code == 200, r.text
    assert r.headers["content-type"] == kind
    table = read_table(r.content, kind)
    assert table.column_names == [*ROW_COLUMNS, *DETAIL_COLUMNS]
    assert table.schema.field("statistic").type == pa.float64()
    assert table.schema.field("lags").type == pa.int64()
    rows = table.to_pylist()
    want = expected_rows(stored)
    assert len(rows) == len(want)
    for row, w in zip(rows, want, strict=True):
        s, c = w["series"], w["check"]
        assert (row["assessment_id"], row["series_id"], row["check"]) == (
            stored["id"],
            s["id"],
            c["name"],
        )
        assert (row["series_verdict"], row["n_obs"], row["status"]) == (
            s["verdict"],
            s["n_obs"],
            c["status"],
        )
        for key in ("statistic", "p_value", "p_adjusted", "message"):
            assert same(row[key], c[key]), (key, row[key], c[key])
        for key in DETAIL_COLUMNS:
            value = c["details"].get(key)
            assert same(row[key], None if isinstance(value, bool) else value), key
    bias = next(r for r in rows if r["check"] == "bias" and r["series_id"] == "biased-0")
    assert bias["mean_error"] > 2.0 and bias["status"] == "fail"
    lb = next(r for r in rows if r["check"] == "ljung_box")
    assert lb["lags"] >= 1 and lb["mean_error"] is None


def test_csv_download_has_flat_columns_and_no_packed_json(client, stored):
    r = client.get(
        f"/v1/assessments/{stored['id']}/series?check=bias",
        headers={**ADMIN, "Accept": "text/csv"},
    )
    assert r.headers["content-type"].startswith("text/csv")
    rows = list(csv.DictReader(io.StringIO(r.text)))
    assert list(rows[0]) == [*ROW_COLUMNS, *DETAIL_COLUMNS]
    assert "details" not in rows[0]
    want = expected_rows(stored, check="bias")
    assert [row["series_id"] for row in rows] == [w["series"]["id"] for w in want]
    for row, w in zip(rows, want, strict=True):
        details = w["check"]["details"]
        assert float(row["mean_error"]) == details["mean_error"]
        assert int(row["df"].split(".")[0]) == details["df"]
        assert row["method"] == details["method"]
        assert row["lags"] == ""


def test_json_pages_walk_every_row_once(client, stored):
    want = expected_rows(stored)
    path = f"/v1/assessments/{stored['id']}/series?limit=7"
    seen = []
    pages = 0
    while path:
        r = client.get(path, headers=ADMIN)
        assert r.status_code == 200, r.text
        page = r.json()
        assert len(page["items"]) <= 7
        seen += page["items"]
        pages += 1
        path = page["next"]
        if path:
            assert r.headers["link"] == f'<{path}>; rel="next"'
            assert page["next_cursor"] in path
        else:
            assert page["next_cursor"] is None and "link" not in r.headers
    assert pages == math.ceil(len(want) / 7)
    assert [(i["series_id"], i["check"]) for i in seen] == [
        (w["series"]["id"], w["check"]["name"]) for w in want
    ]
    assert [i["details"] for i in seen] == [w["check"]["details"] for w in want]


def test_filters_keep_their_place_in_the_next_link(client, stored):
    path = f"/v1/assessments/{stored['id']}/series?status=pass&check=bias&limit=2"
    first = client.get(path, headers=ADMIN).json()
    assert "status=pass" in first["next"] and "check=bias" in first["next"]
    second = client.get(first["next"], headers=ADMIN).json()
    got = [i["series_id"] for i in first["items"] + second["items"]]
    want = [w["series"]["id"] for w in expected_rows(stored, check="bias", status="pass")]
    assert got == want[:4]
    assert {i["status"] for i in first["items"] + second["items"]} == {"pass"}


@pytest.mark.parametrize("status", ["pass", "warn", "fail", "skipped"])
def test_status_filter(client, stored, status):
    r = client.get(f"/v1/assessments/{stored['id']}/series?status={status}", headers=ADMIN)
    items = r.json()["items"]
    assert [(i["series_id"], i["check"]) for i in items] == [
        (w["series"]["id"], w["check"]["name"]) for w in expected_rows(stored, status=status)
    ]


def test_check_filter_takes_every_registered_check(client, stored):
    for check in all_checks():
        r = client.get(f"/v1/assessments/{stored['id']}/series?check={check.name}", headers=ADMIN)
        assert r.status_code == 200
        assert {i["check"] for i in r.json()["items"]} <= {check.name}


@pytest.mark.parametrize(
    ("query", "loc"),
    [
        ("status=failed", "query.status"),
        ("check=Bias", "query.check"),
        ("check=bias&check=arch_lm", "query.check"),
        ("stauts=fail", "query.stauts"),
        ("limit=0", "query.limit"),
        ("limit=100000", "query.limit"),
        ("limit=two", "query.limit"),
        ("cursor=abc", "query.cursor"),
        ("series=none", "query.series"),
    ],
)
def test_bad_parameters_are_422_naming_them(client, stored, query, loc):
    r = client.get(f"/v1/assessments/{stored['id']}/series?{query}", headers=ADMIN)
    assert r.status_code == 422, r.text
    assert r.headers["content-type"] == "application/problem+json"
    assert loc in [e["loc"] for e in r.json()["errors"]]


def test_downloads_carry_an_etag(client, stored):
    path = f"/v1/assessments/{stored['id']}/series"
    first = client.get(path, headers={**ADMIN, "Accept": PARQUET})
    again = client.get(
        path, headers={**ADMIN, "Accept": PARQUET, "If-None-Match": first.headers["etag"]}
    )
    assert again.status_code == 304


def test_accept_with_q_values_picks_the_best_offer(client, stored):
    path = f"/v1/assessments/{stored['id']}/series?check=bias"
    r = client.get(path, headers={**ADMIN, "Accept": f"text/csv;q=0.5, {ARROW};q=0.9"})
    assert r.headers["content-type"] == ARROW
    r = client.get(path, headers={**ADMIN, "Accept": "image/png"})
    assert r.headers["content-type"].startswith("application/json")
