"""``baseline`` on ``POST /v1/assessments``, the comparison endpoint and the verdict's
comparison, in-process on SQLite and PostgreSQL. Fleets are invented (tests/api/
baseline_helpers.py): one reality, versions that differ in their holdout forecasts."""

from __future__ import annotations

import csv
import io

import pytest

from .baseline_helpers import fleet
from .helpers import ADMIN

CHECK = "baseline_accuracy"


def post(client, body, **params):
    return client.post("/v1/assessments", json=body, headers=ADMIN, params=params)


def stored_count(client) -> int:
    r = client.get("/v1/assessments", headers=ADMIN)
    assert r.status_code == 200, r.text
    return len(r.json()["items"])


def first_error(r) -> dict:
    assert r.status_code == 422, r.text
    assert r.headers["content-type"].startswith("application/problem+json")
    return r.json()["errors"][0]


@pytest.fixture
def sound(client):
    """Version 2026.11 of crumb-counts, stored: the sound model (it passes)."""
    r = post(client, fleet("2026.11"))
    assert r.status_code == 201 and r.json()["verdict"] == "pass", r.text
    return r.json()


# --- bad baselines -------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("baseline", "loc", "words"),
    [
        ({"version": "1999.01"}, "baseline.version", "no stored assessment"),
        ({}, "baseline.version", "is required"),
        ({"version": ""}, "baseline.version", "non-empty string"),
        ({"version": 7}, "baseline.version", "non-empty string"),
        ({"version": "2026.11", "against": "x"}, "baseline.against", "unknown field"),
        ("2026.11", "baseline", "must be an object"),
    ],
)
def test_a_bad_baseline_is_a_422_naming_the_field(client, sound, baseline, loc, words):
    body = fleet("2026.12")
    body["baseline"] = baseline
    err = first_error(post(client, body))
    assert err["loc"] == loc and words in err["message"]
    assert stored_count(client) == 1  # nothing of the refused request was stored


def test_a_baseline_without_a_holdout_is_a_422(client):
    body = fleet("2026.10")
    for s in body["series"]:
        del s["holdout"]
    assert post(client, body).status_code == 201
    err = first_error(post(client, fleet("2026.12", baseline="2026.10")))
    assert err["loc"] == "baseline.version" and "has no holdout" in err["message"]


def test_a_baseline_sharing_no_series_is_a_422(client):
    ids = [f"pier-{i:02d}" for i in range(12)]
    assert post(client, fleet("2026.10", ids=ids)).status_code == 201
    err = first_error(post(client, fleet("2026.12", baseline="2026.10")))
    assert err["loc"] == "baseline.version" and "shares no series" in err["message"]


def test_a_baseline_needs_a_holdout_in_the_request(client, sound):
    body = fleet("2026.12", baseline="2026.11")
    for s in body["series"]:
        del s["holdout"]
    err = first_error(post(client, body))
    assert err["loc"] == "baseline" and "holdout" in err["message"]


def test_latest_pass_without_a_passing_version_is_a_422(client):
    worse = fleet("2026.10", extra_sd=0.0)
    for s in worse["series"]:  # a model biased 5 units low: it fails
        s["fitted"] = [v - 5.0 for v in s["fitted"]]
    assert post(client, worse).json()["verdict"] == "fail"
    err = first_error(post(client, fleet("2026.12", baseline="latest-pass")))
    assert err["loc"] == "baseline.version" and "latest-pass" in err["message"]


def test_a_csv_baseline_travels_as_a_query_parameter(client, sound):
    text = "series_id,actual,fitted,part\nx,1,1,train\nx,2,2,train\nx,3,3,holdout\n"
    r = client.post(
        "/v1/assessments",
        content=text,
        headers={**ADMIN, "Content-Type": "text/csv"},
        params={"model": "crumb-counts", "version": "2026.12", "baseline": "1999.01"},
    )
    err = first_error(r)
    assert err["loc"] == "baseline.version" and "no stored assessment" in err["message"]


# --- a comparison --------------------------------------------------------------------------


def test_a_much_less_accurate_version_fails_against_its_baseline(client, sound):
    r = post(client, fleet("2026.12", extra_sd=3.0, version_seed=1, baseline="latest-pass"))
    assert r.status_code == 201, r.text
    doc = r.json()
    assert doc["verdict"] == "fail"
    assert any(c["name"] == CHECK for c in doc["checks"])
    # Errors with sd sqrt(1 + 3^2) against sd 1: the fleet's relative error is far above
    # 1 + margin, and the reason says so against the baseline's version.
    fleet_figures = doc["fleet"]["baseline"]
    assert fleet_figures["baseline"] == "2026.11" and fleet_figures["ci_low"] > 1.5
    assert any("less accurate than version 2026.11" in r["message"] for r in doc["reasons"])
    block = doc["baseline"]
    assert block["requested"] == "latest-pass" and block["version"] == "2026.11"
    assert block["assessment_id"] == sound["id"]
    assert (block["matched_series"], block["matched_periods"]) == (30, 360)
    assert block["matched_by"] == {"timestamp": 30, "position": 0}
    assert block["unmatched_series"] == block["unmatched_periods"] == 0
    # The stored assessment records its baseline, byte for byte as answered.
    again = client.get(f"/v1/assessments/{doc['id']}", headers=ADMIN)
    assert again.json() == doc
    # The verdict carries the comparison.
    verdict = client.get("/v1/models/crumb-counts/verdict", headers=ADMIN).json()
    assert verdict["baseline"]["version"] == "2026.11"
    assert verdict["verdict"] == "fail"
    assert verdict["baseline"]["assessment_id"] == sound["id"]
    assert verdict["baseline"]["check"]["name"] == CHECK
    assert verdict["baseline"]["fleet"] == fleet_figures
    (sentence,) = verdict["baseline"]["reasons"]
    assert sentence.startswith("This version is ") and "than version 2026.11 on 30" in sentence


def test_without_a_baseline_the_check_and_the_block_are_absent(client, sound):
    doc = sound
    assert "baseline" not in doc
    assert all(c["name"] != CHECK for c in doc["checks"])
    verdict = client.get("/v1/models/crumb-counts/verdict", headers=ADMIN).json()
    assert "baseline" not in verdict


def test_periods_match_by_timestamp_and_the_rest_is_reported(client, sound):
    # The new holdout starts two weeks later: 10 of its 12 weeks have a baseline forecast;
    # dock-30 and dock-31 are new, dock-00 to dock-04 dropped.
    ids = [f"dock-{i:02d}" for i in range(5, 32)]
    r = post(client, fleet("2026.12", ids=ids, shift=2, baseline="2026.11"))
    assert r.status_code == 201, r.text
    block = r.json()["baseline"]
    assert block["matched_series"] == 25 and block["matched_periods"] == 250
    assert block["matched_by"] == {"timestamp": 25, "position": 0}
    assert block["unmatched_periods"] == 50
    assert block["unmatched_series_ids"] == ["dock-30", "dock-31"]
    assert block["baseline_only_series_ids"] == [f"dock-{i:02d}" for i in range(5)]


def test_without_timestamps_periods_match_by_position(client):
    assert post(client, fleet("2026.11", stamps=False)).status_code == 201
    r = post(client, fleet("2026.12", stamps=False, shift=2, baseline="2026.11"))
    assert r.status_code == 201, r.text
    block = r.json()["baseline"]
    # By position the shifted holdouts line up step for step: every period matches.
    assert block["matched_by"] == {"timestamp": 0, "position": 30}
    assert block["matched_periods"] == 360 and block["unmatched_periods"] == 0


def test_csv_upload_with_a_baseline(client, sound):
    body = fleet("2026.12", baseline="2026.11")
    lines = ["series_id,timestamp,actual,fitted,part"]
    for s in body["series"]:
        for t, a, f in zip(s["timestamps"], s["actuals"], s["fitted"], strict=True):
            lines.append(f"{s['id']},{t},{a},{f},train")
        h = s["holdout"]
        for t, a, f in zip(h["timestamps"], h["actuals"], h["forecasts"], strict=True):
            lines.append(f"{s['id']},{t},{a},{f},holdout")
    r = client.post(
        "/v1/assessments",
        content="\n".join(lines) + "\n",
        headers={**ADMIN, "Content-Type": "text/csv"},
        params={"model": "crumb-counts", "version": "2026.12", "baseline": "2026.11"},
    )
    assert r.status_code == 201, r.text
    doc = r.json()
    assert doc["baseline"]["version"] == "2026.11" and doc["baseline"]["matched_series"] == 30
    assert any(c["name"] == CHECK for c in doc["checks"])


# --- GET /v1/models/{model}/compare --------------------------------------------------------


def test_compare_two_stored_versions_as_json_and_csv(client, sound):
    assert post(client, fleet("2026.12", extra_sd=3.0, version_seed=1)).status_code == 201
    url = "/v1/models/crumb-counts/compare"
    r = client.get(url, params={"a": "2026.11", "b": "2026.12"}, headers=ADMIN)
    assert r.status_code == 200, r.text
    body = r.json()
    assert body["a"]["version"] == "2026.11" and body["b"]["version"] == "2026.12"
    assert body["matching"]["matched_series"] == 30
    assert body["fleet"]["ci_low"] > 1.5 and body["fleet"]["baseline"] == "2026.11"
    assert len(body["series"]) == 30
    # ETag and 304 while nothing changed.
    same = client.get(
        url,
        params={"a": "2026.11", "b": "2026.12"},
        headers={**ADMIN, "If-None-Match": r.headers["ETag"]},
    )
    assert same.status_code == 304
    row = body["series"][0]
    assert row["series_id"] == "dock-00" and row["matched_periods"] == 12
    assert row["matched_by"] == "timestamp" and row["status"] in ("pass", "warn", "fail")
    # The same comparison as the stored assessment with that baseline gives.
    posted = post(client, fleet("2026.12", extra_sd=3.0, version_seed=1, baseline="2026.11"))
    stored_check = next(c for c in posted.json()["checks"] if c["name"] == CHECK)
    assert body["check"] == stored_check
    assert body["fleet"] == posted.json()["fleet"]["baseline"]
    assert body["reasons"] == [
        r["message"]
        for r in posted.json()["reasons"]
        if r["check"] == CHECK and r["series_id"] is None
    ]
    assert len(body["reasons"]) == 1
    first = next(c for c in posted.json()["series"][0]["checks"] if c["name"] == CHECK)
    assert row["details"] == first["details"] and row["p_adjusted"] == first["p_adjusted"]
    # b's latest assessment is now the one just posted: the old ETag no longer matches.
    again = client.get(
        url,
        params={"a": "2026.11", "b": "2026.12"},
        headers={**ADMIN, "If-None-Match": r.headers["ETag"]},
    )
    assert again.status_code == 200 and again.json()["b"]["assessment_id"] == posted.json()["id"]
    as_csv = client.get(
        url, params={"a": "2026.11", "b": "2026.12"}, headers={**ADMIN, "Accept": "text/csv"}
    )
    assert as_csv.status_code == 200 and as_csv.headers["content-type"].startswith("text/csv")
    rows = list(csv.DictReader(io.StringIO(as_csv.text)))
    assert len(rows) == 30 and rows[0]["series_id"] == "dock-00"
    assert rows[0]["matched_periods"] == "12" and rows[0]["status"] == row["status"]


@pytest.mark.parametrize(
    ("params", "loc"),
    [
        ({"a": "2026.11"}, "query.b"),
        ({"b": "2026.11"}, "query.a"),
        ({"a": "2026.11", "b": "2026.11", "c": "1"}, "query.c"),
        ({"a": "1999.01", "b": "2026.11"}, "query.a"),
        ({"a": "2026.11", "b": "1999.01"}, "query.b"),
    ],
)
def test_compare_refuses_bad_parameters_naming_them(client, sound, params, loc):
    r = client.get("/v1/models/crumb-counts/compare", params=params, headers=ADMIN)
    assert r.status_code == 422, r.text
    assert loc in [e["loc"] for e in r.json()["errors"]]


def test_compare_needs_the_read_scope(client, sound, token):
    r = client.get(
        "/v1/models/crumb-counts/compare",
        params={"a": "2026.11", "b": "2026.11"},
        headers=token("submit"),
    )
    assert r.status_code == 403


# --- several submissions in one pass -------------------------------------------------------


def test_submissions_with_and_without_baselines_in_one_pass_answer_as_alone(client, sound):
    import orjson

    from service.api import assessing
    from service.api.errors import ApiError
    from service.core.batch import stack_key
    from service.settings import Settings

    store = client.app.state.store
    settings = Settings(database_url="sqlite://", admin_token="unused-here")
    bodies = [
        fleet("2026.12", extra_sd=3.0, version_seed=1, baseline="2026.11"),
        fleet("2026.13"),
        fleet("2026.14", extra_sd=0.5, version_seed=2, baseline="latest-pass"),
        fleet("2026.15", baseline="1999.01"),
        fleet("2026.16", ids=[f"dock-{i:02d}" for i in range(10, 40)], baseline="2026.11"),
        fleet("2026.17", extra_sd=1.0, version_seed=3, baseline="2026.11"),
    ]

    def jobs():
        return [
            assessing.Job(req=assessing.parse("json", orjson.dumps(b), {}, settings), store=False)
            for b in bodies
        ]

    def plain(outcome):
        if isinstance(outcome, BaseException):
            return (type(outcome).__name__, getattr(outcome, "errors", None))
        doc = orjson.loads(outcome.body)
        doc.pop("created_at")
        return doc

    pass_jobs = jobs()
    together = [plain(o) for o in assessing.run_many(store, pass_jobs)]
    # The first and the last share their shape and baseline: the core stacks them.
    assert stack_key(pass_jobs[0].req.batch) == stack_key(pass_jobs[5].req.batch)
    assert pass_jobs[0].req.batch.baseline is not None
    separately = [plain(assessing.run_many(store, [j])[0]) for j in jobs()]
    assert together == separately
    assert together[3][0] == ApiError.__name__
    assert together[3][1][0]["loc"] == "baseline.version"
    assert "baseline" not in together[1] and together[0]["baseline"]["version"] == "2026.11"
    assert together[4]["baseline"]["unmatched_series"] == 10  # dock-30 to dock-39


def test_compare_against_latest_pass_and_a_b_without_holdout(client, sound):
    assert post(client, fleet("2026.12", extra_sd=1.0, version_seed=4)).status_code == 201
    r = client.get(
        "/v1/models/crumb-counts/compare",
        params={"a": "latest-pass", "b": "2026.12"},
        headers=ADMIN,
    )
    assert r.status_code == 200, r.text
    body = r.json()
    # The newest other version whose latest verdict passed: 2026.11 (b itself is left out).
    assert body["a"]["assessment_id"] == sound["id"]
    assert body["matching"]["requested"] == "latest-pass"
    bare = fleet("2026.13")
    for s in bare["series"]:
        del s["holdout"]
    assert post(client, bare).status_code == 201
    r = client.get(
        "/v1/models/crumb-counts/compare", params={"a": "2026.11", "b": "2026.13"}, headers=ADMIN
    )
    assert r.status_code == 422 and r.json()["errors"][0]["loc"] == "query.b"
