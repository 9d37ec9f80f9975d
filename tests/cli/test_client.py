"""The Python client: typed results, retries with backoff, one Idempotency-Key per assessment."""

from __future__ import annotations

import dataclasses
import json

import httpx
import pytest
from cli_helpers import SMALL_BODY, FakeServer, problem, result_json

from service.client import (
    AssessmentDocument,
    PlumblineClient,
    RequestRejected,
    ServerError,
    ServerUnreachable,
    verdict_blocks,
)


def make(server: FakeServer, **kwargs) -> tuple[PlumblineClient, list[float]]:
    slept: list[float] = []
    client = PlumblineClient(token="tok", http=server.client(), sleep=slept.append, **kwargs)
    return client, slept


def test_assess_sends_json_with_token_and_key_and_parses_typed_result():
    server = FakeServer([httpx.Response(201, json=result_json("fail"))])
    client, slept = make(server)
    result = client.assess(SMALL_BODY)
    (req,) = server.requests
    assert req.method == "POST" and req.url.path == "/v1/assessments"
    assert req.headers["Authorization"] == "Bearer tok"
    assert req.headers["Content-Type"] == "application/json"
    assert len(req.headers["Idempotency-Key"]) == 36  # a UUID
    assert json.loads(req.content) == SMALL_BODY
    assert isinstance(result, AssessmentDocument)
    assert (result.id, result.verdict, result.replayed) == ("a-1", "fail", False)
    assert result.policy.name == "default" and result.policy.version == 1
    assert result.reasons[0].check == "bias" and result.reasons[0].series_id == "store-1"
    assert result.checks[0].series_failed == 1
    assert result.n_series == 2 and result.count("fail") == 1 and result.count("pass") == 1
    assert slept == []
    with pytest.raises(dataclasses.FrozenInstanceError):
        result.verdict = "pass"  # type: ignore[misc]
    with pytest.raises(TypeError):
        result.labels["verdict"] = "pass"  # type: ignore[index]
    assert result.to_dict()["series"][0]["id"] == "store-1"


def test_csv_goes_as_text_with_query_parameters_and_store_false():
    server = FakeServer([httpx.Response(201, json=result_json("pass", id=None))])
    client, _ = make(server)
    client.assess(
        csv="series_id,actual,fitted\n", params={"model": "m", "season_length": 7}, store=False
    )
    (req,) = server.requests
    assert req.headers["Content-Type"] == "text/csv"
    assert req.content == b"series_id,actual,fitted\n"
    assert dict(req.url.params) == {"model": "m", "season_length": "7", "store": "false"}


def test_retries_connection_errors_then_answers_with_one_idempotency_key():
    server = FakeServer(
        [
            httpx.ConnectError("connection refused"),
            httpx.ReadTimeout("timed out"),
            httpx.Response(200, json=result_json("pass")),
        ]
    )
    retries: list[tuple[int, float, str]] = []
    client, slept = make(server, backoff=0.5, on_retry=lambda *a: retries.append(a))
    result = client.assess(SMALL_BODY)
    keys = {r.headers["Idempotency-Key"] for r in server.requests}
    assert len(server.requests) == 3 and len(keys) == 1
    assert len({r.content for r in server.requests}) == 1  # the same bytes every time
    assert slept == [0.5, 1.0]  # backoff * 2**attempt
    assert [a for a, _, _ in retries] == [1, 2]
    assert result.replayed  # 200: the server returned what it had stored


def test_two_assessments_get_two_keys():
    server = FakeServer([httpx.Response(201, json=result_json("pass"))])
    client, _ = make(server)
    client.assess(SMALL_BODY)
    client.assess(SMALL_BODY)
    assert len({r.headers["Idempotency-Key"] for r in server.requests}) == 2


def test_given_idempotency_key_is_used():
    server = FakeServer([httpx.Response(201, json=result_json("pass"))])
    client, _ = make(server)
    client.assess(SMALL_BODY, idempotency_key="run-8812")
    assert server.requests[0].headers["Idempotency-Key"] == "run-8812"


def test_5xx_is_retried_honouring_retry_after():
    # Retry-After is waited out as asked (up to max_retry_after), not cut to the backoff's cap.
    server = FakeServer(
        [
            httpx.Response(503, headers={"Retry-After": "2"}),
            httpx.Response(502, headers={"Retry-After": "60"}),
            httpx.Response(201, json=result_json("warn")),
        ]
    )
    client, slept = make(server, max_backoff=8.0)
    assert client.assess(SMALL_BODY).verdict == "warn"
    assert slept == [2.0, 60.0]


def test_backoff_doubles_up_to_the_cap():
    server = FakeServer([httpx.ConnectError("refused")])
    client, slept = make(server, retries=5, backoff=1.0, max_backoff=5.0)
    with pytest.raises(ServerUnreachable) as info:
        client.assess(SMALL_BODY)
    assert slept == [1.0, 2.0, 4.0, 5.0, 5.0]
    assert info.value.attempts == 6 and len(server.requests) == 6
    assert "after 6 attempts" in str(info.value) and "ConnectError" in str(info.value)


def test_persistent_5xx_raises_server_error_with_the_problem_detail():
    server = FakeServer([problem(500, "Internal Server Error", "database is locked")])
    client, slept = make(server, retries=2)
    with pytest.raises(ServerError) as info:
        client.assess(SMALL_BODY)
    assert info.value.status == 500 and "database is locked" in str(info.value)
    assert len(server.requests) == 3 and len(slept) == 2


def test_4xx_is_not_retried_and_carries_field_errors():
    errors = [{"loc": f"series[{i}].fitted", "message": "length 2, expected 3"} for i in range(5)]
    server = FakeServer([problem(422, "Unprocessable Content", "invalid request", errors=errors)])
    client, slept = make(server)
    with pytest.raises(RequestRejected) as info:
        client.assess(SMALL_BODY)
    exc = info.value
    assert len(server.requests) == 1 and slept == []
    assert exc.status == 422 and len(exc.errors) == 5
    assert exc.summary() == (
        "422 Unprocessable Content: series[0].fitted: length 2, expected 3; "
        "series[1].fitted: length 2, expected 3; series[2].fitted: length 2, expected 3 "
        "(and 2 more)"
    )


def test_answer_that_is_not_the_api_is_a_server_error():
    server = FakeServer([httpx.Response(200, text="<html>proxy</html>")])
    client, _ = make(server)
    with pytest.raises(ServerError, match="not JSON"):
        client.assess(SMALL_BODY)
    server = FakeServer([httpx.Response(201, json={"verdict": "maybe"})])
    client, _ = make(server)
    with pytest.raises(ServerError, match="verdict"):
        client.assess(SMALL_BODY)


def test_nan_in_body_is_refused_before_sending():
    server = FakeServer([httpx.Response(201, json=result_json("pass"))])
    client, _ = make(server)
    body = {**SMALL_BODY, "series": [{"id": "a", "actuals": [float("nan")], "fitted": [1.0]}]}
    with pytest.raises(ValueError, match="NaN"):
        client.assess(body)
    assert server.requests == []


def test_verdict_412_means_not_met_and_200_met():
    body = {
        "model": "m",
        "version": "1",
        "verdict": "warn",
        "assessment_id": "a-1",
        "created_at": "2026-12-01T21:00:00Z",
    }
    server = FakeServer([httpx.Response(412, json=body), httpx.Response(200, json=body)])
    client, _ = make(server)
    first = client.verdict("m/x", require="pass")
    second = client.verdict("m/x", version="1", require="warn")
    assert (first.met, second.met) == (False, True)
    assert first.verdict == "warn" and first.assessment_id == "a-1"
    assert server.requests[0].url.raw_path == b"/v1/models/m%2Fx/verdict?require=pass"
    assert dict(server.requests[1].url.params) == {"version": "1", "require": "warn"}


def test_create_link_ignores_a_server_without_links():
    server = FakeServer([problem(404, "Not Found"), httpx.Response(201, json={"url": "http://r"})])
    client, _ = make(server)
    assert client.create_link("a-1") is None
    assert client.create_link("a-1") == "http://r"
    assert server.requests[0].url.path == "/v1/assessments/a-1/links"


def test_tokens_endpoints():
    listing = {
        "items": [
            {
                "id": "t1",
                "label": "ci",
                "scopes": ["submit", "read"],
                "created_at": "2026-12-01T20:00:00Z",
                "revoked_at": None,
            }
        ]
    }
    server = FakeServer(
        [
            httpx.Response(201, json={"id": "t1", "token": "secret"}),
            httpx.Response(200, json=listing),
            httpx.Response(204),
        ]
    )
    client, _ = make(server)
    created = client.create_token(scopes=["submit", "read"], label="ci")
    assert (created.id, created.token, created.scopes) == ("t1", "secret", ("submit", "read"))
    (info,) = client.list_tokens()
    assert info.active and info.scopes == ("submit", "read")
    client.revoke_token("t1")
    assert [(r.method, r.url.path) for r in server.requests] == [
        ("POST", "/v1/tokens"),
        ("GET", "/v1/tokens"),
        ("DELETE", "/v1/tokens/t1"),
    ]
    assert json.loads(server.requests[0].content) == {"scopes": ["submit", "read"], "label": "ci"}


@pytest.mark.parametrize("url", ["localhost:8000", "ftp://host", "http://", "not a url"])
def test_base_url_must_be_http(url):
    with pytest.raises(ValueError, match="server URL"):
        PlumblineClient(url)


def test_base_url_prefix_is_kept():
    server = FakeServer([httpx.Response(201, json=result_json("pass"))])
    client = PlumblineClient("http://gate.test/plumbline/", http=server.client())
    client.assess(SMALL_BODY)
    assert str(server.requests[0].url) == "http://gate.test/plumbline/v1/assessments"


def test_transport_can_be_injected():
    server = FakeServer([httpx.Response(201, json=result_json("pass"))])
    with PlumblineClient("http://gate.test", transport=httpx.MockTransport(server)) as client:
        assert client.assess(SMALL_BODY).verdict == "pass"


def test_verdict_blocks_order():
    assert [verdict_blocks(v, "fail") for v in ("pass", "warn", "fail")] == [False, False, True]
    assert [verdict_blocks(v, "warn") for v in ("pass", "warn", "fail")] == [False, True, True]
    with pytest.raises(ValueError, match="fail_on"):
        verdict_blocks("pass", "never")
