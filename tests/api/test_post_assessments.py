"""POST /v1/assessments: JSON and CSV bodies, store=false, Idempotency-Key, and bad input."""

from __future__ import annotations

from datetime import date, timedelta

import orjson
import pytest

from service.core.gate import assess
from service.core.policy import default_policy
from service.ingest import parse_json_request

from .helpers import ADMIN

CONTRACT_TOP = {
    "id",
    "created_at",
    "model",
    "version",
    "policy",
    "verdict",
    "reasons",
    "checks",
    "series",
}
CONTRACT_CHECK = {
    "name",
    "status",
    "series_tested",
    "series_failed",
    "series_warned",
    "failed_share",
    "message",
}
CONTRACT_SERIES = {"id", "verdict", "n_obs", "bias", "checks"}
CONTRACT_BIAS = {"mean_error", "std_error", "ci_low", "ci_high", "percent_bias", "tracking_signal"}
CONTRACT_SERIES_CHECK = {"name", "status", "statistic", "p_value", "p_adjusted", "details"}


def core_result(body: dict) -> dict:
    """What the statistics core says about the same body, without the HTTP layer."""
    return assess(parse_json_request(body).batch, default_policy()).to_dict()


def test_post_returns_the_contract_shape_and_the_core_verdict(client, body):
    b = body(n=3, holdout=8)
    r = client.post("/v1/assessments", json=b, headers=ADMIN)
    assert r.status_code == 201, r.text
    assert r.headers["content-type"].startswith("application/json")
    doc = r.json()
    assert CONTRACT_TOP <= set(doc)
    assert r.headers["location"] == f"/v1/assessments/{doc['id']}"
    assert doc["model"] == "loaves-daily" and doc["version"] == "1"
    assert doc["labels"] == {"run": "7"}
    assert doc["policy"] == {"name": "default", "version": 1}
    expected = core_result(b)
    assert doc["verdict"] == expected["verdict"]
    assert doc["reasons"] == expected["reasons"]
    assert doc["series"] == expected["series"]
    for check in doc["checks"]:
        assert CONTRACT_CHECK <= set(check)
    assert [s["id"] for s in doc["series"]] == ["s0", "s1", "s2"]
    for s in doc["series"]:
        assert CONTRACT_SERIES <= set(s)
        assert CONTRACT_BIAS <= set(s["bias"])
        for c in s["checks"]:
            assert CONTRACT_SERIES_CHECK <= set(c)
    for reason in doc["reasons"]:
        assert reason["status"] in ("warn", "fail") and reason["message"]


def test_stored_result_reads_back_identical(client, body):
    r = client.post("/v1/assessments", json=body(n=2), headers=ADMIN)
    got = client.get(r.headers["location"], headers=ADMIN)
    assert got.status_code == 200
    assert got.json() == r.json()


def test_store_false_computes_without_storing(client, body):
    r = client.post("/v1/assessments?store=false", json=body(n=2), headers=ADMIN)
    assert r.status_code == 200, r.text
    assert r.json()["id"] is None and r.json()["stored"] is False
    assert "location" not in r.headers
    listed = client.get("/v1/assessments", headers=ADMIN).json()
    assert listed["items"] == []


def test_biased_model_fails_bias(client, body):
    # A constant error of 3 residual standard deviations over 156 periods.
    r = client.post("/v1/assessments", json=body(n=2, bias=3.0), headers=ADMIN)
    assert r.status_code == 201
    doc = r.json()
    assert doc["verdict"] == "fail"
    bias = next(c for c in doc["checks"] if c["name"] == "bias")
    assert bias["series_failed"] == 2
    assert any(x["check"] == "bias" and x["status"] == "fail" for x in doc["reasons"])


def to_csv(b: dict) -> str:
    lines = ["series_id,timestamp,actual,fitted,part,lower,upper"]
    for s in b["series"]:
        for t, (a, f) in enumerate(zip(s["actuals"], s["fitted"], strict=True)):
            day = (date(2024, 1, 1) + timedelta(days=t)).isoformat()
            lines.append(f"{s['id']},{day},{a},{'' if f is None else f},train,,")
        h = s.get("holdout")
        if h:
            for t, (a, f, lo, up) in enumerate(
                zip(h["actuals"], h["forecasts"], h["lower"], h["upper"], strict=True)
            ):
                day = (date(2025, 1, 1) + timedelta(days=t)).isoformat()
                lines.append(f"{s['id']},{day},{a},{f},holdout,{lo},{up}")
    return "\n".join(lines) + "\n"


def test_csv_upload_matches_the_json_body(client, body):
    b = body(n=2, holdout=6)
    for s in b["series"]:
        s.pop("timestamps", None)
    r_json = client.post("/v1/assessments?store=false", json=b, headers=ADMIN).json()
    r = client.post(
        "/v1/assessments?model=loaves-daily&version=1&level=0.95",
        content=to_csv(b),
        headers={**ADMIN, "Content-Type": "text/csv"},
    )
    assert r.status_code == 201, r.text
    doc = r.json()
    assert doc["verdict"] == r_json["verdict"]
    strip = [{k: v for k, v in s.items()} for s in doc["series"]]
    assert strip == r_json["series"]


def test_csv_without_model_is_422_naming_it(client, body):
    r = client.post(
        "/v1/assessments", content=to_csv(body(n=1)), headers={**ADMIN, "Content-Type": "text/csv"}
    )
    assert r.status_code == 422
    assert {"model", "version"} <= {e["loc"] for e in r.json()["errors"]}


def test_csv_missing_column_is_422(client):
    r = client.post(
        "/v1/assessments?model=m&version=1",
        content="series_id,actual\na,1\n",
        headers={**ADMIN, "Content-Type": "text/csv"},
    )
    assert r.status_code == 422
    assert r.json()["errors"][0]["loc"] == "header.fitted"


def test_csv_formula_cell_is_422_naming_line_and_column(client):
    text = "series_id,actual,fitted\na,1,\na,=1+2,1\n"
    r = client.post(
        "/v1/assessments?model=m&version=1",
        content=text,
        headers={**ADMIN, "Content-Type": "text/csv"},
    )
    assert r.status_code == 422
    assert r.json()["errors"][0]["loc"] == "line[3].actual"


def test_malformed_csv_is_400(client):
    text = 'series_id,actual,fitted\n"a,1,2\n'
    r = client.post(
        "/v1/assessments?model=m&version=1",
        content=text,
        headers={**ADMIN, "Content-Type": "text/csv"},
    )
    assert r.status_code == 400
    assert r.headers["content-type"] == "application/problem+json"


def test_idempotency_key_replays_same_body(client, body):
    b = body(n=2)
    h = {**ADMIN, "Idempotency-Key": "run-8812"}
    first = client.post("/v1/assessments", json=b, headers=h)
    again = client.post("/v1/assessments", json=b, headers=h)
    assert first.status_code == 201 and again.status_code == 200
    assert again.json() == first.json()
    assert again.headers["idempotent-replayed"] == "true"
    assert len(client.get("/v1/assessments", headers=ADMIN).json()["items"]) == 1


def test_idempotency_key_with_another_body_is_409(client, body):
    h = {**ADMIN, "Idempotency-Key": "run-8813"}
    assert client.post("/v1/assessments", json=body(n=2), headers=h).status_code == 201
    r = client.post("/v1/assessments", json=body(n=3), headers=h)
    assert r.status_code == 409
    assert r.headers["content-type"] == "application/problem+json"
    assert "Idempotency-Key" in r.json()["detail"]


def test_bad_idempotency_key_is_422(client, body):
    r = client.post(
        "/v1/assessments", json=body(n=1), headers={**ADMIN, "Idempotency-Key": "x" * 201}
    )
    assert r.status_code == 422
    assert r.json()["errors"][0]["loc"] == "header.Idempotency-Key"


def test_bad_store_flag_is_422(client, body):
    r = client.post("/v1/assessments?store=perhaps", json=body(n=1), headers=ADMIN)
    assert r.status_code == 422
    assert r.json()["errors"][0]["loc"] == "query.store"


def post_raw(client, raw: bytes):
    return client.post(
        "/v1/assessments", content=raw, headers={**ADMIN, "Content-Type": "application/json"}
    )


def one_series(**fields) -> dict:
    s = {"id": "a", "actuals": [1.0, 2.0, 3.0, 4.0], "fitted": [None, 1.0, 2.0, 3.0]}
    s.update(fields)
    return s


def envelope(*series) -> dict:
    return {"model": "m", "version": "1", "series": list(series)}


@pytest.mark.parametrize(
    ("raw", "loc", "words"),
    [
        (
            b'{"model":"m","version":"1","series":[{"id":"a","actuals":[1,NaN],"fitted":[1,2]}]}',
            "series[0].actuals",
            "NaN",
        ),
        (
            b'{"model":"m","version":"1","series":[{"id":"a","actuals":[1,2],"fitted":[1,Infinity]}]}',
            "series[0].fitted",
            "Infinity",
        ),
        (
            b'{"model":"m","version":"1","series":[{"id":"a","actuals":[1,2e400],"fitted":[1,2]}]}',
            "series[0].actuals",
            "overflows",
        ),
        (
            b'{"model":"m","version":"1","series":[{"id":"a","actuals":[1,2],"fitted":[1,'
            + b"9" * 400
            + b"]}]}",
            "series[0].fitted",
            "overflows",
        ),
    ],
)
def test_non_finite_literals_name_the_field(client, raw, loc, words):
    r = post_raw(client, raw)
    assert r.status_code == 422, r.text
    err = r.json()["errors"][0]
    assert err["loc"] == loc and words in err["message"]


_SERIES = b'"id":"a","actuals":[1,2,3,4],"fitted":[null,1,2,3]'


@pytest.mark.parametrize("digits", [400, 5000])  # 5,000: beyond Python's int-conversion limit
@pytest.mark.parametrize(
    ("template", "loc"),
    [
        (
            b'{"model":"m","version":"1","series":[{' + _SERIES + b',"weight":BIG}]}',
            "series[0].weight",
        ),
        (
            b'{"model":"m","version":"1","series":[{' + _SERIES + b',"holdout":{"actuals":[1],'
            b'"forecasts":[1],"lower":[0],"upper":[2],"level":BIG}}]}',
            "series[0].holdout.level",
        ),
        (
            b'{"model":"m","version":"1","season_length":BIG,"series":[{' + _SERIES + b"}]}",
            "season_length",
        ),
        (
            b'{"model":"m","version":"1","labels":{"run":BIG},"series":[{' + _SERIES + b"}]}",
            "labels.run",
        ),
        (
            b'{"model":"m","version":"1","policy":{"name":"p","checks":{"bias":{"fail_p":BIG}}},'
            b'"series":[{' + _SERIES + b"}]}",
            "policy.checks.bias.fail_p",
        ),
        (
            b'{"model":"m","version":"1","series":[{"id":"a","actuals":[1,BIG,3,4],'
            b'"fitted":[null,1,2,3]}]}',
            "series[0].actuals",
        ),
    ],
)
def test_integers_too_large_for_a_float_name_the_field(client, template, loc, digits):
    r = post_raw(client, template.replace(b"BIG", b"1" + b"0" * digits))
    assert r.status_code == 422, r.text
    assert r.headers["content-type"] == "application/problem+json"
    assert r.json()["errors"][0]["loc"] == loc


@pytest.mark.parametrize("digits", [400, 5000])
def test_a_policy_with_an_integer_too_large_is_422(client, digits):
    raw = b'{"name":"p","checks":{"ljung_box":{"lags":1' + b"0" * digits + b"}}}"
    r = client.post(
        "/v1/policies", content=raw, headers={**ADMIN, "Content-Type": "application/json"}
    )
    assert r.status_code == 422, r.text
    assert r.json()["errors"][0]["loc"] == "checks.ljung_box.lags"


@pytest.mark.parametrize(
    ("doc", "loc"),
    [
        (envelope(one_series(fitted=[1.0, 2.0])), "series[0].fitted"),
        (envelope(one_series(), one_series()), "series[1].id"),
        (
            envelope(
                one_series(timestamps=["2025-01-01", "2025-01-03", "2025-01-02", "2025-01-04"])
            ),
            "series[0].timestamps",
        ),
        (
            envelope(
                one_series(timestamps=["2025-01-01", "2025-01-01", "2025-01-02", "2025-01-04"])
            ),
            "series[0].timestamps",
        ),
        (
            envelope(one_series(timestamps=["2025-01-01", "soon", "2025-01-02", "2025-01-04"])),
            "series[0].timestamps",
        ),
        (
            envelope(
                one_series(
                    holdout={
                        "actuals": [1, 2],
                        "forecasts": [1, 2],
                        "lower": [0, 3],
                        "upper": [2, 2.5],
                    }
                )
            ),
            "series[0].holdout.lower",
        ),
        (
            envelope(
                one_series(
                    holdout={
                        "actuals": [1, 2],
                        "forecasts": [1, 2],
                        "lower": [0, 1],
                        "upper": [2, 3],
                        "level": 1.0,
                    }
                )
            ),
            "series[0].holdout.level",
        ),
        (
            envelope(
                one_series(
                    holdout={
                        "actuals": [1, 2],
                        "forecasts": [1, 2],
                        "lower": [0, 1],
                        "upper": [2, 3],
                        "level": 0,
                    }
                )
            ),
            "series[0].holdout.level",
        ),
        (
            envelope(one_series(holdout={"actuals": [1, 2], "forecasts": [1]})),
            "series[0].holdout.forecasts",
        ),
        (envelope(one_series(holdout={"actuals": [1, 2]})), "series[0].holdout.forecasts"),
        (envelope(one_series(actuals=[1, "2", 3, 4])), "series[0].actuals"),
        (envelope(one_series(actuals=[1, True, 3, 4])), "series[0].actuals"),
        (envelope(one_series(weight=-1)), "series[0].weight"),
        (envelope(one_series(id="")), "series[0].id"),
        (envelope(one_series(colour="red")), "series[0].colour"),
        (envelope(one_series(actuals=[])), "series[0].actuals"),
        ({"model": "m", "version": "1", "series": []}, "series"),
        ({"model": "m", "series": [one_series()]}, "version"),
        (
            {"model": "m", "version": "1", "season_length": 0, "series": [one_series()]},
            "season_length",
        ),
        (
            {"model": "m", "version": "1", "model_params": -1, "series": [one_series()]},
            "model_params",
        ),
        (
            {"model": "m", "version": "1", "labels": {"a": [1]}, "series": [one_series()]},
            "labels.a",
        ),
        (
            {"model": "m", "version": "1", "policy": "no-such-policy", "series": [one_series()]},
            "policy",
        ),
        ({"model": "m", "version": "1", "policy": 5, "series": [one_series()]}, "policy"),
        (
            {"model": "m", "version": "1", "seasonal_length": 4, "series": [one_series()]},
            "seasonal_length",
        ),
    ],
)
def test_invalid_bodies_are_422_naming_the_field(client, doc, loc):
    r = post_raw(client, orjson.dumps(doc))
    assert r.status_code == 422, r.text
    assert r.headers["content-type"] == "application/problem+json"
    problem = r.json()
    assert {"type", "title", "status", "detail", "errors"} <= set(problem)
    assert problem["status"] == 422
    assert loc in [e["loc"] for e in problem["errors"]], problem


def test_inline_policy_problem_is_located_under_policy(client):
    doc = envelope(one_series())
    doc["policy"] = {"name": "inline", "checks": {"no_such_check": {}}}
    r = post_raw(client, orjson.dumps(doc))
    assert r.status_code == 422, r.text
    assert all(e["loc"].startswith("policy") for e in r.json()["errors"])


@pytest.mark.parametrize("raw", [b"{", b"", b"[1, 2", b'{"model": "m",}', b"\xff\xfe"])
def test_unparseable_json_is_400(client, raw):
    r = post_raw(client, raw)
    assert r.status_code == 400
    assert r.headers["content-type"] == "application/problem+json"
    assert r.json()["status"] == 400


def test_json_that_is_not_an_object_is_422(client):
    r = post_raw(client, b"[1, 2]")
    assert r.status_code == 422
    assert r.json()["errors"][0]["loc"] == "body"


@pytest.mark.parametrize("ctype", ["text/plain", "application/xml", None])
def test_wrong_content_type_is_415(client, body, ctype):
    headers = dict(ADMIN)
    if ctype:
        headers["Content-Type"] = ctype
    r = client.post("/v1/assessments", content=orjson.dumps(body(n=1)), headers=headers)
    assert r.status_code == 415
    assert r.headers["content-type"] == "application/problem+json"


def test_declared_length_over_limit_is_413(make_client, body):
    client = make_client(max_body_bytes=1000)
    r = client.post(
        "/v1/assessments",
        content=orjson.dumps(body(n=3)),
        headers={**ADMIN, "Content-Type": "application/json"},
    )
    assert r.status_code == 413
    assert r.headers["content-type"] == "application/problem+json"


def test_streamed_body_over_limit_is_413(make_client):
    client = make_client(max_body_bytes=1000)
    sent = []

    def chunks():
        for _ in range(100):
            sent.append(1)
            yield b" " * 100

    r = client.post(
        "/v1/assessments", content=chunks(), headers={**ADMIN, "Content-Type": "application/json"}
    )
    assert r.status_code == 413


def test_too_many_series_is_422(make_client, body):
    client = make_client(max_series=2)
    r = client.post("/v1/assessments", json=body(n=3), headers=ADMIN)
    assert r.status_code == 422
    assert r.json()["errors"][0]["loc"] == "series"


def test_too_long_series_is_422(make_client, body):
    client = make_client(max_series_length=100)
    r = client.post("/v1/assessments", json=body(n=1), headers=ADMIN)
    assert r.status_code == 422
    assert r.json()["errors"][0]["loc"] == "series[0].actuals"


def test_server_timing_names_each_stage(client, body):
    r = client.post("/v1/assessments", json=body(n=1), headers=ADMIN)
    stages = [part.split(";")[0].strip() for part in r.headers["server-timing"].split(",")]
    assert stages == ["parse", "policy", "assess", "encode", "store"]


def test_values_too_large_for_the_statistics_are_422(client):
    doc = envelope(one_series(actuals=[1e300, 2e300, 3e300, 4e300]))
    r = post_raw(client, orjson.dumps(doc))
    assert r.status_code == 422
    err = r.json()["errors"][0]
    assert err["loc"] == "series[0].actuals" and "magnitude" in err["message"]


@pytest.mark.parametrize(
    ("doc", "loc"),
    [
        ({"model": "a\u0000b", "version": "1", "series": [one_series()]}, "model"),
        (envelope(one_series(id="a\u0000")), "series[0].id"),
        (
            {"model": "m", "version": "1", "policy": {"name": "p\u0000"}, "series": [one_series()]},
            "policy.name",
        ),
    ],
)
def test_nul_characters_in_names_are_422(client, doc, loc):
    r = post_raw(client, orjson.dumps(doc))
    assert r.status_code == 422, r.text
    assert r.json()["errors"][0]["loc"] == loc


def test_unpaired_surrogate_escape_is_400_naming_the_field(client):
    raw = b'{"model":"m","version":"1","series":[{"id":"\\ud800","actuals":[1,2],"fitted":[1,2]}]}'
    r = post_raw(client, raw)
    assert r.status_code == 400
    assert r.json()["errors"][0]["loc"] == "series[0].id"


def test_series_inputs_are_kept_for_the_report(client, settings, body):
    import numpy as np

    from service.store import make_engine
    from service.store import repository as repo

    b = body(n=2, holdout=5)
    b["series"][0]["timestamps"] = [
        (date(2024, 1, 1) + timedelta(weeks=t)).isoformat()
        for t in range(len(b["series"][0]["actuals"]))
    ]
    b["series"][1]["weight"] = 12.5
    doc = client.post("/v1/assessments", json=b, headers=ADMIN).json()
    engine = make_engine(settings.database_url)
    try:
        kept = repo.series_inputs(engine, assessment_id=doc["id"])
    finally:
        engine.dispose()
    assert [k.series_id for k in kept] == ["s0", "s1"]
    for k, s in zip(kept, b["series"], strict=True):
        np.testing.assert_array_equal(k.actuals, s["actuals"])
        np.testing.assert_array_equal(k.fitted, s["fitted"])
        np.testing.assert_array_equal(k.holdout_actuals, s["holdout"]["actuals"])
        np.testing.assert_array_equal(k.holdout_lower, s["holdout"]["lower"])
        assert k.holdout_level == 0.95
    assert kept[0].timestamps == b["series"][0]["timestamps"]
    assert kept[1].timestamps is None
    assert kept[0].weight is None and kept[1].weight == 12.5
