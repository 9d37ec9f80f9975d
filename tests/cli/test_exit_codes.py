"""Every exit code of ``plumbline assess`` and ``plumbline verdict`` against scripted servers.

The same paths against the real app in-process are in ``test_against_app.py``.
"""

from __future__ import annotations

import json

import httpx
import pytest
from cli_helpers import FakeServer, closed_port, problem, result_json

URL = "http://plumbline.test"


@pytest.fixture(autouse=True)
def _no_sleep(monkeypatch):
    slept: list[float] = []
    monkeypatch.setattr("time.sleep", slept.append)
    return slept


def assess(cli, body_file, server, *extra):
    return cli(
        "assess", str(body_file), "--server", URL, "--token", "t", *extra, http=server.client()
    )


@pytest.mark.parametrize(
    ("verdict", "fail_on", "code"),
    [
        ("pass", "fail", 0),
        ("warn", "fail", 0),
        ("fail", "fail", 1),
        ("pass", "warn", 0),
        ("warn", "warn", 1),
        ("fail", "warn", 1),
    ],
)
def test_gate_exit_code_follows_verdict_and_fail_on(cli, body_file, verdict, fail_on, code):
    server = FakeServer([httpx.Response(201, json=result_json(verdict))])
    run = assess(cli, body_file, server, "--fail-on", fail_on)
    assert run.code == code, run.err
    assert run.out.startswith(f"verdict: {verdict.upper()}")
    state = "BLOCKS" if code else "passes"
    assert run.out.rstrip().splitlines()[-1].startswith(f"gate: {state}")


def test_human_output_has_reasons_and_check_table(cli, body_file):
    server = FakeServer([httpx.Response(201, json=result_json("fail"))])
    out = assess(cli, body_file, server).out
    assert "model m 1   policy default v1" in out
    assert "series:  2 assessed, 1 failed, 0 warned, 1 passed" in out
    assert "stored:  assessment a-1" in out
    assert "fail  bias  [store-1] residuals average +2.1: the forecasts run low" in out
    lines = out.splitlines()
    header = next(line for line in lines if line.strip().startswith("check"))
    assert header.split() == [
        "check",
        "status",
        "tested",
        "failed",
        "warned",
        "untested",
        "failed%",
    ]
    assert lines[lines.index(header) + 1].split() == ["bias", "fail", "2", "1", "0", "0", "50.0%"]


def test_json_output_is_the_full_answer(cli, body_file):
    answer = result_json("warn")
    server = FakeServer([httpx.Response(201, json=answer)])
    run = assess(cli, body_file, server, "--json", "--fail-on", "warn")
    assert run.code == 1
    assert json.loads(run.out) == answer


def test_report_link_from_the_links_endpoint(cli, body_file):
    server = FakeServer(
        [
            httpx.Response(201, json=result_json("pass")),
            httpx.Response(201, json={"url": "http://plumbline.test/r/abc"}),
        ]
    )
    run = assess(cli, body_file, server)
    assert run.code == 0
    assert "report:  http://plumbline.test/r/abc" in run.out
    assert server.requests[1].url.path == "/v1/assessments/a-1/links"


def test_server_without_links_prints_none(cli, body_file):
    server = FakeServer([httpx.Response(201, json=result_json("pass")), problem(404, "Not Found")])
    run = assess(cli, body_file, server)
    assert run.code == 0 and "report:" not in run.out and run.err == ""


def test_no_store_sends_store_false_and_asks_no_link(cli, body_file):
    server = FakeServer([httpx.Response(201, json=result_json("pass", id=None))])
    run = assess(cli, body_file, server, "--no-store")
    assert run.code == 0 and "stored:  no (--no-store)" in run.out
    assert len(server.requests) == 1 and server.requests[0].url.params["store"] == "false"


def test_overrides_are_sent_in_the_body(cli, body_file, tmp_path):
    policy = tmp_path / "strict.json"
    policy.write_text(json.dumps({"name": "strict", "checks": {"bias": {"fail_p": 0.05}}}))
    server = FakeServer([httpx.Response(201, json=result_json("pass"))])
    run = assess(
        cli,
        body_file,
        server,
        "--model",
        "weekly",
        "--version",
        "7",
        "--policy",
        str(policy),
        "--season-length",
        "52",
        "--model-params",
        "3",
        "--label",
        "pipeline_run=8812",
    )
    assert run.code == 0, run.err
    sent = json.loads(server.requests[0].content)
    assert sent["model"] == "weekly" and sent["version"] == "7"
    assert sent["policy"] == {"name": "strict", "checks": {"bias": {"fail_p": 0.05}}}
    assert sent["season_length"] == 52 and sent["model_params"] == 3
    assert sent["labels"] == {"pipeline_run": "8812"}


def test_policy_name_is_sent_as_a_name(cli, body_file):
    server = FakeServer([httpx.Response(201, json=result_json("pass"))])
    assess(cli, body_file, server, "--policy", "release")
    assert json.loads(server.requests[0].content)["policy"] == "release"


def test_server_and_token_from_the_environment(cli, body_file, monkeypatch):
    monkeypatch.setenv("PLUMBLINE_SERVER", URL)
    monkeypatch.setenv("PLUMBLINE_TOKEN", "from-env")
    server = FakeServer([httpx.Response(201, json=result_json("pass"))])
    run = cli("assess", str(body_file), http=server.client())
    assert run.code == 0
    assert server.requests[0].headers["Authorization"] == "Bearer from-env"


def test_unreachable_server_exits_3(cli, body_file, _no_sleep):
    port = closed_port()
    run = cli("assess", str(body_file), "--server", f"http://127.0.0.1:{port}", "--retries", "2")
    assert run.code == 3
    assert f"server unreachable at http://127.0.0.1:{port} after 3 attempts" in run.err
    assert run.err.count("retry") == 2  # each retry said on stderr
    assert _no_sleep == [0.5, 1.0]
    assert "Traceback" not in run.err


def test_server_error_exits_3_after_retries(cli, body_file):
    server = FakeServer([problem(500, "Internal Server Error", "boom")])
    run = assess(cli, body_file, server, "--retries", "1")
    assert run.code == 3 and len(server.requests) == 2
    assert "server error 500" in run.err and "boom" in run.err


def test_retried_then_answered_exits_by_verdict(cli, body_file):
    server = FakeServer(
        [
            httpx.ConnectError("refused"),
            problem(503, "Unavailable"),
            httpx.Response(200, json=result_json("pass")),
        ]
    )
    run = assess(cli, body_file, server)
    assert run.code == 0
    posts = [r for r in server.requests if r.url.path == "/v1/assessments"]
    assert len(posts) == 3 and len({r.headers["Idempotency-Key"] for r in posts}) == 1
    assert "stored earlier under the same Idempotency-Key" in run.out


def test_invalid_request_exits_2_naming_the_field(cli, body_file):
    errors = [{"loc": "series[0].fitted", "message": "has 2 values, expected 3"}]
    server = FakeServer([problem(422, "Unprocessable Content", "invalid", errors=errors)])
    run = assess(cli, body_file, server)
    assert run.code == 2
    assert run.err.strip() == (
        "plumbline: error: request refused: 422 Unprocessable Content: "
        "series[0].fitted: has 2 values, expected 3"
    )


def test_refused_token_exits_2_with_a_hint(cli, body_file):
    server = FakeServer([problem(401, "Unauthorized", "unknown or revoked token")])
    run = assess(cli, body_file, server)
    assert run.code == 2 and len(run.err.splitlines()) == 1
    assert "unknown or revoked token" in run.err and "--token" not in run.err
    run = cli("assess", str(body_file), "--server", URL, http=server.client())
    assert run.code == 2 and "no token given: pass --token or set PLUMBLINE_TOKEN" in run.err
    server = FakeServer([problem(403, "Forbidden", "not allowed")])
    run = assess(cli, body_file, server)
    assert run.code == 2 and "the token lacks the scope this needs" in run.err


def verdict_body(verdict):
    return {
        "model": "m",
        "version": "1",
        "verdict": verdict,
        "assessment_id": "a-9",
        "created_at": "2026-12-01T21:00:00Z",
    }


@pytest.mark.parametrize(
    ("status", "verdict", "require", "code"),
    [
        (200, "pass", "pass", 0),
        (412, "warn", "pass", 1),
        (200, "warn", "warn", 0),
        (412, "fail", "warn", 1),
    ],
)
def test_verdict_command(cli, status, verdict, require, code):
    server = FakeServer([httpx.Response(status, json=verdict_body(verdict))])
    run = cli("verdict", "m", "--require", require, "--server", URL, http=server.client())
    assert run.code == code
    assert server.requests[0].url.params["require"] == require
    assert f"latest verdict {verdict} (assessment a-9" in run.out
    assert ("NOT met" in run.out) == bool(code)


def test_verdict_defaults_to_require_pass_and_prints_json(cli):
    server = FakeServer([httpx.Response(412, json=verdict_body("warn"))])
    run = cli("verdict", "m", "--version", "1", "--json", "--server", URL, http=server.client())
    assert run.code == 1
    assert json.loads(run.out)["met"] is False
    assert dict(server.requests[0].url.params) == {"version": "1", "require": "pass"}


def test_verdict_with_nothing_stored_blocks(cli):
    server = FakeServer([problem(404, "Not Found", "no assessment of model m")])
    run = cli("verdict", "m", "--server", URL, http=server.client())
    assert run.code == 1
    assert "no stored assessment for m; --require pass not met" in run.err


def test_verdict_unreachable_exits_3(cli):
    run = cli("verdict", "m", "--server", f"http://127.0.0.1:{closed_port()}", "--retries", "0")
    assert run.code == 3 and "server unreachable" in run.err


def test_a_failing_report_link_changes_nothing_but_a_note(cli, body_file):
    server = FakeServer(
        [
            httpx.Response(201, json=result_json("fail")),
            problem(503, "Unavailable", "report links are not available"),
        ]
    )
    run = assess(cli, body_file, server)
    assert run.code == 1
    assert "no report link" in run.err and "report links are not available" in run.err
    assert [r.url.path for r in server.requests].count("/v1/assessments/a-1/links") == 1


def test_tokens_go_to_the_server_from_the_environment(cli, monkeypatch):
    monkeypatch.setenv("PLUMBLINE_SERVER", URL)
    monkeypatch.setenv("PLUMBLINE_DATABASE_URL", "sqlite:///never-opened.db")
    server = FakeServer([httpx.Response(200, json={"items": []})])
    run = cli("tokens", "list", "--token", "adm", http=server.client())
    assert run.code == 0 and run.out == "no tokens\n"
    assert server.requests[0].url.path == "/v1/tokens"


def test_tokens_database_and_server_exclude_each_other(cli):
    run = cli("tokens", "list", "--database", "sqlite://", "--server", URL)
    assert run.code == 2 and "--database and --server" in run.err


@pytest.mark.slow  # a slow server, twice
def test_a_slow_answer_shows_a_spinner_on_a_terminal_only(cli, body_file, monkeypatch):
    import threading

    def slow(request):
        threading.Event().wait(0.6)  # time.sleep is patched out in this module's tests
        return httpx.Response(201, json=result_json("pass"))

    server = FakeServer([slow])
    run = assess(cli, body_file, server, "--no-store")
    assert run.code == 0 and run.err == ""  # not a terminal: quiet
    monkeypatch.setattr("service.cli.assess.interactive", lambda: True)
    run = assess(cli, body_file, server, "--no-store")
    assert run.code == 0
    assert f"assessing {body_file} (1 series) on {URL}" in run.err
    assert run.err.endswith("\r\033[K")  # the line is wiped before the result is printed
