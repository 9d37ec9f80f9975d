"""Parquet uploads as background jobs: stored as sent in parts, assessed chunk by chunk, and
stored part by part, with the synchronous POST's assessment to the last bit.

The fleet is invented (a few hundred weekly series of an invented bakery chain: ragged
lengths, gaps, a holdout with intervals on some). The chunk, part and spool sizes are made
small so that every path runs in several pieces.
"""

from __future__ import annotations

import io
from datetime import datetime, timedelta
from typing import Any

import numpy as np
import orjson
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from service.api import parquet_jobs, spool
from service.store import make_store

from .helpers import ADMIN

PARQUET = "application/vnd.apache.parquet"
QUERY = "model=loaves-weekly&version=7&season_length=4&level=0.9"
ASYNC = {**ADMIN, "Prefer": "respond-async", "Content-Type": PARQUET}
SYNC = {**ADMIN, "Content-Type": PARQUET}


@pytest.fixture(autouse=True)
def small_pieces(monkeypatch):
    monkeypatch.setattr(parquet_jobs, "SERIES_PER_CHUNK", 74)
    monkeypatch.setattr(parquet_jobs, "WRITE_SERIES", 37)
    monkeypatch.setattr(parquet_jobs, "PART_BYTES", 4096)
    monkeypatch.setattr(spool, "SPOOL_BYTES", 10_000)


def invented_fleet(n: int = 230, seed: int = 11, stamps: str = "timestamp") -> bytes:
    """An invented fleet in the long layout as Parquet bytes (series contiguous)."""
    rng = np.random.default_rng(seed)
    cols: dict[str, list[Any]] = {
        k: [] for k in ("series_id", "timestamp", "actual", "fitted", "part", "lower", "upper")
    }
    start = datetime(2025, 1, 6)
    for i in range(n):
        t = int(rng.integers(6, 60))
        h = int(rng.integers(0, 6)) if i % 3 else 0
        level = 50 + 10 * rng.standard_normal()
        actual = level + rng.standard_normal(t + h) * (1 + i % 4)
        fitted = actual + rng.standard_normal(t + h) * 0.8 + (0.5 if i % 17 == 0 else 0.0)
        gaps = rng.random(t + h) < 0.05
        bounded = i % 2 == 0
        for k in range(t + h):
            holdout = k >= t
            cols["series_id"].append(f"store-{i:04d}")
            cols["timestamp"].append(start + timedelta(weeks=k))
            cols["actual"].append(None if gaps[k] else float(actual[k]))
            cols["fitted"].append(float(fitted[k]))
            cols["part"].append("holdout" if holdout else "train")
            cols["lower"].append(float(fitted[k] - 2) if holdout and bounded else None)
            cols["upper"].append(float(fitted[k] + 2) if holdout and bounded else None)
    if stamps == "timestamp":
        stamp_array = pa.array(cols["timestamp"], pa.timestamp("us"))
    elif stamps == "date":
        stamp_array = pa.array([d.date() for d in cols["timestamp"]], pa.date32())
    else:
        stamp_array = pa.array([d.strftime("%Y-%m-%d") for d in cols["timestamp"]], pa.string())
    table = pa.table(
        {
            "series_id": pa.array(cols["series_id"], pa.string()),
            "timestamp": stamp_array,
            "actual": pa.array(cols["actual"], pa.float64()),
            "fitted": pa.array(cols["fitted"], pa.float64()),
            "part": pa.array(cols["part"], pa.string()),
            "lower": pa.array(cols["lower"], pa.float64()),
            "upper": pa.array(cols["upper"], pa.float64()),
        }
    )
    out = io.BytesIO()
    pq.write_table(table, out, row_group_size=997)
    return out.getvalue()


def _result(doc: dict[str, Any]) -> dict[str, Any]:
    return {k: v for k, v in doc.items() if k not in ("id", "created_at")}


def _run_job(client, data: bytes, query: str = QUERY) -> dict[str, Any]:
    r = client.post(f"/v1/assessments?{query}", content=data, headers=ASYNC)
    assert r.status_code == 202, r.text
    runner = client.app.state.services.jobs
    assert runner.run_once() is True
    done = client.get(r.headers["location"], headers=ADMIN).json()
    assert done["state"] == "done", done
    return done


def _inputs(settings, assessment_id: str) -> list[Any]:
    store = make_store(settings.database_url)
    try:
        return store.series_inputs(assessment_id=assessment_id)  # type: ignore[return-value]
    finally:
        store.close()


def _same_inputs(a: list[Any], b: list[Any]) -> None:
    assert len(a) == len(b)
    for x, y in zip(a, b, strict=True):
        for name in ("series_id", "weight", "timestamps", "holdout_timestamps", "burn_in"):
            assert getattr(x, name) == getattr(y, name), name
        for name in (
            "actuals",
            "fitted",
            "holdout_actuals",
            "holdout_forecasts",
            "holdout_lower",
            "holdout_upper",
        ):
            u, v = getattr(x, name), getattr(y, name)
            assert (u is None) == (v is None), name
            if u is not None:
                assert np.asarray(u).tobytes() == np.asarray(v).tobytes(), name
        assert (x.holdout_level is None) == (y.holdout_level is None)


@pytest.mark.parametrize("stamps", ["timestamp", "date", "text"])
def test_a_parquet_job_stores_the_sync_assessment_to_the_last_bit(make_client, settings, stamps):
    client = make_client(job_workers=0)
    data = invented_fleet(stamps=stamps)
    assert len(data) > spool.SPOOL_BYTES  # spooled to a file, stored in several parts
    done = _run_job(client, data)
    assert done["progress"]["series_total"] == 230
    sync = client.post(f"/v1/assessments?{QUERY}", content=data, headers=SYNC)
    assert sync.status_code == 201, sync.text
    job_doc = client.get(done["assessment"]["href"], headers=ADMIN)
    sync_doc = client.get(sync.headers["location"], headers=ADMIN)
    # Byte for byte once the id and the time are set aside: the floats are written as the
    # shortest text that reads back to the same double.
    a, b = orjson.loads(job_doc.content), orjson.loads(sync_doc.content)
    assert _result(a) == _result(b)
    assert len(a["series"]) == 230 and a["verdict"] in ("pass", "warn", "fail")
    assert any(s["verdict"] != "pass" for s in a["series"])  # rows with reasons, in parts
    strip = len(a["id"])
    assert job_doc.content.replace(a["id"].encode(), b"x" * strip).replace(
        a["created_at"].encode(), b""
    ) == sync_doc.content.replace(b["id"].encode(), b"x" * strip).replace(
        b["created_at"].encode(), b""
    )
    _same_inputs(
        _inputs(settings, a["id"]),
        _inputs(settings, b["id"]),
    )


def test_views_and_downloads_of_a_parquet_job(make_client):
    client = make_client(job_workers=0)
    data = invented_fleet(n=120, seed=3)
    done = _run_job(client, data)
    sync = client.post(f"/v1/assessments?{QUERY}", content=data, headers=SYNC)
    href, other = done["assessment"]["href"], sync.headers["location"]
    for view in ("flagged", "none"):
        a = client.get(f"{href}?series={view}", headers=ADMIN).json()
        b = client.get(f"{other}?series={view}", headers=ADMIN).json()
        assert a["series_shown"] == view
        assert _result(a) == _result(b)
    flagged = client.get(f"{href}?series=flagged", headers=ADMIN).json()["series"]
    assert flagged and all(s["verdict"] != "pass" for s in flagged)
    for accept in ("text/csv", "application/vnd.apache.parquet"):
        a = client.get(f"{href}/series", headers={**ADMIN, "Accept": accept})
        b = client.get(f"{other}/series", headers={**ADMIN, "Accept": accept})
        assert a.status_code == 200 and b.status_code == 200
        if accept == "text/csv":
            ida, idb = href.rsplit("/", 1)[1], other.rsplit("/", 1)[1]
            assert a.text.replace(ida, "ID") == b.text.replace(idb, "ID")
        else:
            ta = pq.read_table(pa.BufferReader(a.content)).drop_columns(["assessment_id"])
            tb = pq.read_table(pa.BufferReader(b.content)).drop_columns(["assessment_id"])
            assert ta.equals(tb)
    page = client.get(f"{href}/series?limit=5", headers=ADMIN).json()
    assert len(page["items"]) == 5


def test_a_bad_parquet_job_is_422_naming_the_column_and_row(make_client, settings):
    client = make_client(job_workers=0)
    table = pq.read_table(pa.BufferReader(invented_fleet(n=40)))
    fitted = table.column("fitted").to_pylist()
    fitted[123] = float("inf")
    table = table.set_column(3, "fitted", pa.array(fitted, pa.float64()))
    out = io.BytesIO()
    pq.write_table(table, out)
    r = client.post(f"/v1/assessments?{QUERY}", content=out.getvalue(), headers=ASYNC)
    assert r.status_code == 422, r.text
    locs = [e["loc"] for e in r.json()["errors"]]
    # Rows counted from 0, as the synchronous columnar upload counts them.
    assert "row[123].fitted" in locs
    sync = client.post(f"/v1/assessments?{QUERY}", content=out.getvalue(), headers=SYNC)
    assert sync.status_code == 422
    assert "row[123].fitted" in [e["loc"] for e in sync.json()["errors"]]
    assert client.app.state.services.jobs.run_once() is False  # nothing was queued


def test_an_empty_timestamp_on_a_holdout_row_is_refused_as_the_upload_refuses_it(make_client):
    client = make_client(job_workers=0)
    table = pq.read_table(pa.BufferReader(invented_fleet(n=20, seed=5)))
    part = table.column("part").to_pylist()
    row = part.index("holdout")
    stamps = table.column("timestamp").to_pylist()
    stamps[row] = None
    table = table.set_column(1, "timestamp", pa.array(stamps, pa.timestamp("us")))
    out = io.BytesIO()
    pq.write_table(table, out)
    r = client.post(f"/v1/assessments?{QUERY}", content=out.getvalue(), headers=ASYNC)
    assert r.status_code == 422, r.text
    assert f"row[{row}].timestamp" in [e["loc"] for e in r.json()["errors"]]


def test_series_not_together_go_the_whole_file_way(make_client):
    # The chunked reader needs each series' rows together; such a file is parsed whole
    # instead, as the synchronous upload parses it, and gets its answer.
    client = make_client(job_workers=0)
    table = pq.read_table(pa.BufferReader(invented_fleet(n=30, seed=8)))
    order = np.argsort(np.arange(table.num_rows) % 7, kind="stable")
    shuffled = table.take(pa.array(order))
    out = io.BytesIO()
    pq.write_table(shuffled, out)
    r = client.post(f"/v1/assessments?{QUERY}", content=out.getvalue(), headers=ASYNC)
    # Timestamps out of order within a series are what both paths refuse here.
    sync = client.post(f"/v1/assessments?{QUERY}", content=out.getvalue(), headers=SYNC)
    assert r.status_code == sync.status_code == 422
    assert r.json()["errors"] == sync.json()["errors"]
    # Without timestamps the same rows are a valid fleet, assessed whole.
    out = io.BytesIO()
    pq.write_table(shuffled.drop_columns(["timestamp"]), out)
    done = _run_job(client, out.getvalue())
    sync = client.post(f"/v1/assessments?{QUERY}", content=out.getvalue(), headers=SYNC)
    a = client.get(done["assessment"]["href"], headers=ADMIN).json()
    b = client.get(sync.headers["location"], headers=ADMIN).json()
    assert _result(a) == _result(b)


def test_a_job_stored_in_parts_survives_a_restart(make_client, settings):
    data = invented_fleet(n=60, seed=9)
    first = make_client(job_workers=0)
    r = first.post(f"/v1/assessments?{QUERY}", content=data, headers=ASYNC)
    assert r.status_code == 202
    first.close()
    # A worker takes the job and dies before it finishes: the parts stay with the job.
    store = make_store(settings.database_url)
    try:
        dead = store.claim_job(worker="gone:1", lease_seconds=1e-6)
        assert dead is not None and parquet_jobs.is_described(dead.input)
        assert sum(len(p) for p in store.job_input_parts(job_id=dead.job.id)) == len(data)
    finally:
        store.close()
    again = make_client(job_workers=0)  # the service started again
    assert again.app.state.services.jobs.run_once() is True
    done = again.get(r.headers["location"], headers=ADMIN).json()
    assert done["state"] == "done" and done["attempts"] == 2
    sync = again.post(f"/v1/assessments?{QUERY}", content=data, headers=SYNC)
    a = again.get(done["assessment"]["href"], headers=ADMIN).json()
    b = again.get(sync.headers["location"], headers=ADMIN).json()
    assert _result(a) == _result(b)
    store = make_store(settings.database_url)
    try:  # the parts went with the job's end
        assert list(store.job_input_parts(job_id=dead.job.id)) == []
    finally:
        store.close()


def test_an_idempotent_repeat_of_a_parquet_job(make_client):
    client = make_client(job_workers=0)
    data = invented_fleet(n=25, seed=4)
    headers = {**ASYNC, "Idempotency-Key": "loaves-7"}
    first = client.post(f"/v1/assessments?{QUERY}", content=data, headers=headers)
    again = client.post(f"/v1/assessments?{QUERY}", content=data, headers=headers)
    assert first.status_code == again.status_code == 202
    assert again.headers["idempotent-replayed"] == "true"
    assert first.json()["id"] == again.json()["id"]
    other = client.post(f"/v1/assessments?{QUERY}", content=data[:-1] + b"x", headers=headers)
    assert other.status_code == 409


def test_burn_in_goes_the_whole_file_way(make_client):
    client = make_client(job_workers=0)
    data = invented_fleet(n=30, seed=6)
    query = QUERY + "&burn_in=2"
    done = _run_job(client, data, query)
    sync = client.post(f"/v1/assessments?{query}", content=data, headers=SYNC)
    a = client.get(done["assessment"]["href"], headers=ADMIN).json()
    b = client.get(sync.headers["location"], headers=ADMIN).json()
    assert _result(a) == _result(b)
