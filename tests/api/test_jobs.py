"""Background assessments: ``Prefer: respond-async`` on ``POST /v1/assessments`` and
``GET /v1/jobs/{id}``, in-process on both backends.

Most tests run an app whose own job threads are off (``job_workers=0``) and take the job with
the runner's ``run_once``, so each step is observed in order; one runs the app's threads and
polls, with a generous deadline only as a hang guard.
"""

from __future__ import annotations

import time
from typing import Any

import numpy as np
import orjson
import pytest

from service.api.jobs import JobRunner, decode_request, encode_request, prefers_async
from service.ingest import parse_json_request
from service.store import make_store

from .helpers import ADMIN, white_noise_series

ASYNC = {**ADMIN, "Prefer": "respond-async"}
HANG_GUARD_SECONDS = 120.0


def _result(doc: dict[str, Any]) -> dict[str, Any]:
    """An assessment without what differs between two stored copies (id, time)."""
    return {k: v for k, v in doc.items() if k not in ("id", "created_at")}


def _runner(client) -> JobRunner:
    return client.app.state.services.jobs


def _fleet(n: int = 6, holdout: int = 8) -> dict[str, Any]:
    series = [white_noise_series(f"s{i}", seed=i, holdout=holdout) for i in range(n)]
    series[1]["weight"] = 2.5
    if n > 2:
        series[2] = white_noise_series("s2", seed=2, bias=0.8)  # no holdout, biased
    return {"model": "ovens", "version": "4", "labels": {"site": "north"}, "series": series}


def test_prefer_header_parsing():
    # RFC 7240 section 2: comma-separated preferences, case-insensitive names, parameters.
    assert prefers_async("respond-async")
    assert prefers_async("Respond-Async")
    assert prefers_async("wait=10, respond-async")
    assert prefers_async("respond-async; x=1")
    assert not prefers_async("return=minimal")
    assert not prefers_async("respond-asynchronously")
    assert not prefers_async(None)
    assert not prefers_async("")


def test_stored_input_gives_back_the_same_arrays():
    body = _fleet()
    days = np.datetime64("2026-01-05") + np.arange(156) * 7
    body["series"][0]["timestamps"] = [str(d) for d in days]
    req = parse_json_request(orjson.dumps(body))
    back = decode_request(encode_request(req))
    for name in ("actuals", "fitted", "weights", "lengths", "burn_in", "weights_given"):
        a, b = getattr(req.batch, name), getattr(back.batch, name)
        assert a.dtype == b.dtype and a.tobytes() == b.tobytes(), name
    for name in ("actuals", "forecasts", "lower", "upper", "level"):
        a, b = getattr(req.batch.holdout, name), getattr(back.batch.holdout, name)
        assert a.tobytes() == b.tobytes(), name
    assert back.ids == req.ids and back.timestamps == req.timestamps
    assert back.weights_given == req.weights_given and back.labels == req.labels
    assert np.array_equal(back.train_lengths, req.train_lengths)


def test_stored_input_of_a_ragged_fleet_full_precision():
    # Pipelines send full-precision floats (17 significant digits); a ragged fleet's padding
    # is not stored: the input takes well under the JSON's bytes and comes back exactly.
    rng = np.random.default_rng(7)
    series = []
    for i, n in enumerate([30, 400, 52, 9, 156]):
        a = 50 + rng.normal(size=n)
        f = a + rng.normal(size=n)
        a[n // 2] = np.nan  # a gap inside the series
        series.append(
            {
                "id": f"r{i}",
                "actuals": [None if np.isnan(v) else float(v) for v in a],
                "fitted": f.tolist(),
            }
        )
    body = orjson.dumps({"model": "m", "version": "1", "series": series})
    req = parse_json_request(body)
    blob = encode_request(req)
    back = decode_request(blob)
    assert back.batch.actuals.tobytes() == req.batch.actuals.tobytes()
    assert back.batch.fitted.tobytes() == req.batch.fitted.tobytes()
    assert back.batch.holdout is None
    assert len(blob) < 0.6 * len(body)


def test_async_post_answers_202_and_the_job_ends_with_the_sync_answer(make_client):
    client = make_client(job_workers=0)
    body = _fleet()
    r = client.post("/v1/assessments", json=body, headers=ASYNC)
    assert r.status_code == 202, r.text
    assert r.headers["preference-applied"] == "respond-async"
    job = r.json()
    assert r.headers["location"] == f"/v1/jobs/{job['id']}"
    assert job["state"] == "queued" and job["assessment"] is None and job["error"] is None
    assert job["progress"] == {"series_done": 0, "series_total": 6}

    seen = client.get(r.headers["location"], headers=ADMIN)
    assert seen.status_code == 200 and seen.json()["state"] == "queued"
    assert seen.headers["retry-after"] == "1"

    assert _runner(client).run_once() is True
    assert _runner(client).run_once() is False  # nothing else queued

    done = client.get(r.headers["location"], headers=ADMIN).json()
    assert done["state"] == "done" and done["attempts"] == 1
    assert done["progress"] == {"series_done": 6, "series_total": 6}
    assert done["finished_at"] is not None and done["started_at"] is not None
    href = done["assessment"]["href"]
    assert href == f"/v1/assessments/{done['assessment']['id']}"
    stored = client.get(href, headers=ADMIN)
    assert stored.status_code == 200
    sync = client.post("/v1/assessments", json=body, headers=ADMIN)
    assert sync.status_code == 201
    assert _result(stored.json()) == _result(sync.json())
    # The job's assessment keeps its inputs like a synchronous one (the report redraws them).
    rows = client.get(href + "/series", headers=ADMIN).json()["items"]
    assert {row["series_id"] for row in rows} == {f"s{i}" for i in range(6)}


def test_csv_upload_as_a_job(make_client):
    client = make_client(job_workers=0)
    lines = ["series_id,actual,fitted"]
    for i in range(3):
        s = white_noise_series(f"c{i}", seed=i)
        lines += [f"c{i},{a},{f}" for a, f in zip(s["actuals"], s["fitted"], strict=True)]
    text = "\n".join(lines) + "\n"
    params = {"model": "kilns", "version": "2"}
    headers = {**ASYNC, "Content-Type": "text/csv"}
    r = client.post("/v1/assessments", content=text, params=params, headers=headers)
    assert r.status_code == 202, r.text
    assert _runner(client).run_once()
    done = client.get(r.headers["location"], headers=ADMIN).json()
    sync = client.post(
        "/v1/assessments",
        content=text,
        params=params,
        headers={**ADMIN, "Content-Type": "text/csv"},
    )
    stored = client.get(done["assessment"]["href"], headers=ADMIN).json()
    assert _result(stored) == _result(sync.json())


def test_the_apps_own_thread_runs_the_job(make_client):
    client = make_client()  # one job thread, as served
    r = client.post("/v1/assessments", json=_fleet(3), headers=ASYNC)
    assert r.status_code == 202
    deadline = time.monotonic() + HANG_GUARD_SECONDS
    state = "queued"
    while state in ("queued", "running"):
        assert time.monotonic() < deadline, "the job did not end"
        time.sleep(0.02)
        state = client.get(r.headers["location"], headers=ADMIN).json()["state"]
    assert state == "done"


@pytest.mark.parametrize(
    "change, loc",
    [
        (lambda b: b["series"][0].update(fitted=[1.0, 2.0]), "series[0].fitted"),
        (lambda b: b.update(policy="no-such-policy"), "policy"),
        (lambda b: b.pop("model"), "model"),
    ],
)
def test_bad_input_is_answered_at_once_and_queues_nothing(make_client, change, loc):
    client = make_client(job_workers=0)
    body = _fleet(2)
    change(body)
    r = client.post("/v1/assessments", json=body, headers=ASYNC)
    assert r.status_code == 422, r.text
    assert r.headers["content-type"] == "application/problem+json"
    assert loc in [e["loc"] for e in r.json()["errors"]]
    assert _runner(client).run_once() is False  # no job was made


def test_store_false_is_answered_synchronously(make_client):
    client = make_client(job_workers=0)
    r = client.post("/v1/assessments?store=false", json=_fleet(2), headers=ASYNC)
    assert r.status_code == 200 and r.json()["id"] is None
    assert "preference-applied" not in r.headers


def test_idempotency_key_names_the_same_job(make_client):
    client = make_client(job_workers=0)
    body = _fleet(3)
    keyed = {**ASYNC, "Idempotency-Key": "ovens-4-night"}
    first = client.post("/v1/assessments", json=body, headers=keyed)
    again = client.post("/v1/assessments", json=body, headers=keyed)
    assert first.status_code == again.status_code == 202
    assert again.headers["location"] == first.headers["location"]
    assert again.headers["idempotent-replayed"] == "true"
    other = _fleet(4)
    clash = client.post("/v1/assessments", json=other, headers=keyed)
    assert clash.status_code == 409
    assert clash.json()["type"].endswith("idempotency-key-reused")

    assert _runner(client).run_once()
    assert _runner(client).run_once() is False  # one job for the key
    done = client.get(first.headers["location"], headers=ADMIN).json()
    # Once stored, the key answers as for a synchronous repeat: the stored result.
    later = client.post("/v1/assessments", json=body, headers=keyed)
    assert later.status_code == 200 and later.headers["idempotent-replayed"] == "true"
    assert later.json()["id"] == done["assessment"]["id"]
    sync_repeat = client.post(
        "/v1/assessments", json=body, headers={**ADMIN, "Idempotency-Key": "ovens-4-night"}
    )
    assert sync_repeat.status_code == 200
    assert sync_repeat.json()["id"] == done["assessment"]["id"]


def test_a_key_stored_by_a_sync_post_first_is_replayed(make_client):
    client = make_client(job_workers=0)
    body = _fleet(2)
    sync = client.post("/v1/assessments", json=body, headers={**ADMIN, "Idempotency-Key": "k1"})
    assert sync.status_code == 201
    r = client.post("/v1/assessments", json=body, headers={**ASYNC, "Idempotency-Key": "k1"})
    assert r.status_code == 200 and r.json()["id"] == sync.json()["id"]
    assert _runner(client).run_once() is False


def test_a_sync_post_storing_the_key_while_the_job_waits(make_client):
    # The job's result would be the same assessment again: the job ends with the stored one.
    client = make_client(job_workers=0)
    body = _fleet(2)
    r = client.post("/v1/assessments", json=body, headers={**ASYNC, "Idempotency-Key": "k2"})
    sync = client.post("/v1/assessments", json=body, headers={**ADMIN, "Idempotency-Key": "k2"})
    assert r.status_code == 202 and sync.status_code == 201
    assert _runner(client).run_once()
    done = client.get(r.headers["location"], headers=ADMIN).json()
    assert done["state"] == "done" and done["assessment"]["id"] == sync.json()["id"]
    listed = client.get("/v1/assessments", headers=ADMIN).json()["items"]
    assert len(listed) == 1


def test_a_server_side_failure_is_recorded_on_the_job(make_client, settings):
    client = make_client(job_workers=0)
    r = client.post("/v1/assessments", json=_fleet(2), headers=ASYNC)

    def broken(_job, _progress):
        raise RuntimeError("the disk under the scratch space went away")

    store = make_store(settings.database_url)
    try:
        assert JobRunner(store, client.app.state.settings, work=broken).run_once()
    finally:
        store.close()
    job = client.get(r.headers["location"], headers=ADMIN).json()
    assert job["state"] == "failed" and job["assessment"] is None
    assert job["error"]["status"] == 500
    assert job["error"]["type"] == "urn:plumbline:problem:internal-error"
    assert "disk" not in job["error"]["detail"]  # no internals in the answer
    assert "retry-after" not in client.get(r.headers["location"], headers=ADMIN).headers
    assert client.get("/v1/assessments", headers=ADMIN).json()["items"] == []


def test_a_job_whose_worker_died_is_taken_up_again(make_client, settings):
    client = make_client(job_workers=0)
    body = _fleet(3)
    r = client.post("/v1/assessments", json=body, headers=ASYNC)
    # A worker takes the job and dies: its lease (none left here) is never renewed.
    store = make_store(settings.database_url)
    try:
        dead = store.claim_job(worker="gone:1", lease_seconds=1e-6)
    finally:
        store.close()
    assert dead is not None and dead.job.id == r.json()["id"]
    assert client.get(r.headers["location"], headers=ADMIN).json()["state"] == "running"
    assert _runner(client).run_once()
    done = client.get(r.headers["location"], headers=ADMIN).json()
    assert done["state"] == "done" and done["attempts"] == 2
    sync = client.post("/v1/assessments", json=body, headers=ADMIN).json()
    stored = client.get(done["assessment"]["href"], headers=ADMIN).json()
    assert _result(stored) == _result(sync)


def test_a_job_that_keeps_killing_its_worker_fails(make_client, settings):
    client = make_client(job_workers=0, job_max_attempts=2)
    r = client.post("/v1/assessments", json=_fleet(2), headers=ASYNC)
    store = make_store(settings.database_url)
    try:
        for _ in range(2):  # two workers take it and die
            assert store.claim_job(worker="gone:1", lease_seconds=1e-6) is not None
    finally:
        store.close()
    assert _runner(client).run_once()
    job = client.get(r.headers["location"], headers=ADMIN).json()
    assert job["state"] == "failed" and job["attempts"] == 3
    assert job["error"]["type"] == "urn:plumbline:problem:job-abandoned"
    assert "started 2 times" in job["error"]["detail"]


def test_jobs_need_the_read_scope(make_client, token):
    client = make_client(job_workers=0)
    submit, read = token("submit"), token("read")
    r = client.post(
        "/v1/assessments", json=_fleet(2), headers={**submit, "Prefer": "respond-async"}
    )
    assert r.status_code == 202
    where = r.headers["location"]
    assert client.get(where).status_code == 401
    assert client.get(where, headers=submit).status_code == 403
    assert client.get(where, headers=read).status_code == 200
    assert (
        client.post(
            "/v1/assessments", json=_fleet(2), headers={**read, "Prefer": "respond-async"}
        ).status_code
        == 403
    )


def test_unknown_job_is_404(client):
    r = client.get("/v1/jobs/nope", headers=ADMIN)
    assert r.status_code == 404 and "nope" in r.json()["detail"]


def test_a_job_with_a_baseline_and_a_burn_in_ends_with_the_sync_answer(make_client):
    """The request's baseline and burn-in travel with the stored job input: the job's
    assessment is the one a synchronous POST of the same body stores (invented fleet of
    tests/api/baseline_helpers.py), and a baseline that cannot be compared is a 422 at once."""
    from .baseline_helpers import fleet

    client = make_client(job_workers=0)
    assert client.post("/v1/assessments", json=fleet("2026.11"), headers=ADMIN).status_code == 201
    body = {**fleet("2026.12", extra_sd=3.0, version_seed=1, baseline="latest-pass"), "burn_in": 2}
    body["series"][0]["burn_in"] = 3

    refused = client.post(
        "/v1/assessments", json={**body, "baseline": {"version": "1999.01"}}, headers=ASYNC
    )
    assert refused.status_code == 422, refused.text
    assert refused.json()["errors"][0]["loc"] == "baseline.version"
    assert _runner(client).run_once() is False  # nothing was queued

    r = client.post("/v1/assessments", json=body, headers=ASYNC)
    assert r.status_code == 202, r.text
    assert _runner(client).run_once() is True
    done = client.get(r.headers["location"], headers=ADMIN).json()
    assert done["state"] == "done", done
    stored = client.get(done["assessment"]["href"], headers=ADMIN).json()
    sync = client.post("/v1/assessments", json=body, headers=ADMIN)
    assert sync.status_code == 201, sync.text
    assert stored["verdict"] == "fail" and stored["baseline"]["version"] == "2026.11"
    strip = ("id", "created_at", "baseline")
    assert {k: v for k, v in stored.items() if k not in strip} == {
        k: v for k, v in sync.json().items() if k not in strip
    }
    assert {k: v for k, v in stored["baseline"].items() if k != "created_at"} == {
        k: v for k, v in sync.json()["baseline"].items() if k != "created_at"
    }


def test_stored_input_keeps_the_burn_in_and_the_baseline_asked_for():
    body = {**_fleet(), "burn_in": 2, "baseline": {"version": "latest-pass"}}
    body["series"][0]["burn_in"] = 4
    req = parse_json_request(orjson.dumps(body))
    back = decode_request(encode_request(req))
    assert back.baseline == "latest-pass" and back.request_burn_in == 2
    assert back.burn_in_given == req.burn_in_given
    assert np.array_equal(back.burn_in, req.burn_in)
    assert np.array_equal(back.fitted_given, req.fitted_given, equal_nan=True)
    assert np.array_equal(back.batch.fitted, req.batch.fitted, equal_nan=True)
