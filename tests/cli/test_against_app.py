"""The command line against the real service in-process (httpx's ASGI transport), fresh
SQLite database per test. Request bodies come from the invented demo scenario."""

from __future__ import annotations

import json

import httpx
import pytest
from cli_helpers import AppTransport, FlakyTransport, closed_port

from service import demo
from service.client import PlumblineClient, RequestRejected

URL = "http://testserver"
ADMIN = "admin-secret-for-tests"


@pytest.fixture
def db_url(tmp_path):
    return f"sqlite:///{tmp_path / 'plumbline.db'}"


@pytest.fixture
def app(db_url):
    from service.api.app import create_app
    from service.settings import Settings

    # Tokens revoked by the CLI straight on the database must be refused at once here, so the
    # app looks every token up (token_cache_seconds=0); the default, a worker remembering a
    # verified token for 2 s, is tested in tests/api/test_token_cache.py.
    return create_app(Settings(database_url=db_url, admin_token=ADMIN, token_cache_seconds=0))


@pytest.fixture
def transport(app):
    t = AppTransport(app)
    yield t
    t.close()


@pytest.fixture
def http(transport):
    with httpx.Client(transport=transport, base_url=URL) as client:
        yield client


@pytest.fixture(autouse=True)
def _no_sleep(monkeypatch):
    monkeypatch.setattr("time.sleep", lambda seconds: None)


@pytest.fixture
def files(tmp_path):
    directory = tmp_path / "demo"
    demo.write_demo(str(directory))
    return directory


def stored(http, **filters):
    resp = http.get("/v1/assessments", params=filters, headers={"Authorization": f"Bearer {ADMIN}"})
    assert resp.status_code == 200, resp.text
    return resp.json()["items"]


def assess(cli, http, path, *extra, token=ADMIN):
    return cli("assess", str(path), "--server", URL, "--token", token, *extra, http=http)


@pytest.mark.parametrize(
    ("file", "verdict", "fail_on", "code"),
    [
        ("weekday.json", "pass", "fail", 0),
        ("stale.json", "fail", "fail", 1),
        ("shared-week.json", "warn", "fail", 0),
        ("shared-week.json", "warn", "warn", 1),
    ],
)
def test_assess_exit_codes_on_the_service(cli, http, files, file, verdict, fail_on, code):
    run = assess(cli, http, files / file, "--fail-on", fail_on)
    assert run.code == code, run.err
    assert run.out.startswith(f"verdict: {verdict.upper()}")
    (row,) = stored(http)
    assert row["verdict"] == verdict and f"stored:  assessment {row['id']}" in run.out
    # The service signs a report link for the stored assessment; the CLI prints it.
    assert f"/v1/assessments/{row['id']}/report" in run.out and run.err == ""


def test_json_output_is_what_the_service_stored(cli, http, files):
    run = assess(cli, http, files / "stale.json", "--json")
    assert run.code == 1
    printed = json.loads(run.out)
    again = http.get(
        f"/v1/assessments/{printed['id']}", headers={"Authorization": f"Bearer {ADMIN}"}
    ).json()
    assert printed["verdict"] == again["verdict"] == "fail"
    assert printed["reasons"] == again["reasons"]


def test_retry_after_a_lost_answer_stores_once(cli, transport, files):
    flaky = FlakyTransport(transport)
    with httpx.Client(transport=flaky, base_url=URL) as http:
        run = assess(cli, http, files / "stale.json")
        assert run.code == 1, run.err
        assert len(flaky.posts) == 3
        assert len({r.headers["Idempotency-Key"] for r in flaky.posts}) == 1
        assert run.err.count("retry") == 2
        assert "stored earlier under the same Idempotency-Key" in run.out
        assert len(stored(http)) == 1


def test_same_key_with_another_body_is_refused(http, files):
    weekday = json.loads((files / "weekday.json").read_text())
    stale = json.loads((files / "stale.json").read_text())
    client = PlumblineClient(URL, token=ADMIN, http=http)
    client.assess(weekday, idempotency_key="run-1")
    assert client.assess(weekday, idempotency_key="run-1").replayed
    with pytest.raises(RequestRejected) as info:
        client.assess(stale, idempotency_key="run-1")
    assert info.value.status == 409


def test_csv_upload_with_options(cli, http, files):
    run = assess(
        cli,
        http,
        files / "weekday.csv",
        "--model",
        "wrenfield-pickups-weekday",
        "--version",
        "csv-1",
        "--season-length",
        "7",
    )
    assert run.code == 0, run.err
    (row,) = stored(http)
    assert (row["model"], row["version"], row["verdict"]) == (
        "wrenfield-pickups-weekday",
        "csv-1",
        "pass",
    )


def test_csv_with_a_policy_file_and_labels_is_sent_as_json(cli, http, files, tmp_path):
    policy = tmp_path / "lenient.json"
    policy.write_text(
        json.dumps(
            {
                "name": "lenient-bias",
                "checks": {
                    "bias": {
                        "warn_p": 1e-60,
                        "fail_p": 1e-60,
                        "fleet_warn_p": 1e-60,
                        "fleet_fail_p": 1e-60,
                    }
                },
            }
        )
    )
    csv_text = demo.to_csv(json.loads((files / "stale.json").read_text()))
    path = tmp_path / "stale.csv"
    path.write_text(csv_text)
    run = assess(
        cli,
        http,
        path,
        "--model",
        "stale",
        "--version",
        "1",
        "--season-length",
        "7",
        "--policy",
        str(policy),
        "--label",
        "pipeline_run=8812",
        "--json",
    )
    result = json.loads(run.out)
    assert result["policy"]["name"] == "lenient-bias"
    assert result["labels"] == {"pipeline_run": "8812"}
    assert "bias" not in {r["check"] for r in result["reasons"] if r["status"] == "fail"}


def test_json_and_csv_of_the_same_request_agree(cli, http, files):
    a = json.loads(assess(cli, http, files / "weekday.json", "--no-store", "--json").out)
    b = json.loads(
        assess(
            cli,
            http,
            files / "weekday.csv",
            "--no-store",
            "--json",
            "--model",
            "wrenfield-pickups-weekday",
            "--version",
            demo.VERSION,
            "--season-length",
            "7",
        ).out
    )
    assert a["id"] is None and b["id"] is None
    assert a["checks"] == b["checks"] and a["series"] == b["series"]
    assert stored(http) == []


def test_invalid_request_names_the_field(cli, http, tmp_path):
    path = tmp_path / "bad.json"
    path.write_text(
        json.dumps(
            {
                "model": "m",
                "version": "1",
                "series": [{"id": "a", "actuals": [1.0, 2.0, 3.0], "fitted": [1.0, 2.0]}],
            }
        )
    )
    run = assess(cli, http, path)
    assert run.code == 2
    assert "series[0]" in run.err and "fitted" in run.err and len(run.err.splitlines()) == 1


def test_unknown_stored_policy_is_refused(cli, http, files):
    run = assess(cli, http, files / "weekday.json", "--policy", "no-such-policy")
    assert run.code == 2 and "no-such-policy" in run.err


def test_missing_and_wrong_tokens(cli, http, files):
    run = cli("assess", str(files / "weekday.json"), "--server", URL, http=http)
    assert run.code == 2 and "401" in run.err and "PLUMBLINE_TOKEN" in run.err
    run = assess(cli, http, files / "weekday.json", token="not-a-token")
    assert run.code == 2 and "401" in run.err


def test_verdict_against_the_service(cli, http, files):
    assert assess(cli, http, files / "stale.json").code == 1
    assert assess(cli, http, files / "shared-week.json").code == 0

    def verdict(model, *extra):
        return cli("verdict", model, "--server", URL, "--token", ADMIN, *extra, http=http)

    stale, shared = "wrenfield-pickups-stale", "wrenfield-pickups-shared-week"
    assert verdict(stale, "--require", "warn").code == 1
    assert verdict(shared, "--require", "pass").code == 1
    run = verdict(shared, "--require", "warn", "--version", demo.VERSION)
    assert run.code == 0 and "latest verdict warn" in run.out
    run = verdict(shared, "--version", "never-assessed")
    assert run.code == 1 and "no stored assessment" in run.err
    run = verdict("wrenfield-nothing")
    assert run.code == 1 and "no stored assessment" in run.err


def test_tokens_through_the_api(cli, http, files):
    def tokens(*argv, token=ADMIN):
        return cli("tokens", *argv, "--server", URL, "--token", token, http=http)

    run = tokens("create", "--scope", "read", "--label", "dashboard", "--json")
    assert run.code == 0, run.err
    created = json.loads(run.out)
    assert created["scopes"] == ["read"] and created["token"]

    listing = json.loads(tokens("list", "--json").out)["items"]
    assert [(t["id"], t["label"], t["revoked_at"]) for t in listing] == [
        (created["id"], "dashboard", None)
    ]
    assert "dashboard" in tokens("list").out

    # a read token may not submit
    run = assess(cli, http, files / "weekday.json", token=created["token"])
    assert run.code == 2 and "403" in run.err and "scope" in run.err

    assert tokens("revoke", created["id"]).code == 0
    run = tokens("list", token=created["token"])
    assert run.code == 2 and "401" in run.err
    run = tokens("revoke", "no-such-id")
    assert run.code == 2 and "404" in run.err


def test_tokens_straight_on_the_database_then_used_on_the_api(cli, http, db_url, files):
    run = cli(
        "tokens",
        "create",
        "--scope",
        "submit",
        "--scope",
        "read",
        "--label",
        "ci",
        "--database",
        db_url,
    )
    assert run.code == 0, run.err
    secret = run.out.splitlines()[1]
    assert "shown once" in run.out
    assert assess(cli, http, files / "weekday.json", token=secret).code == 0

    run = cli("tokens", "list", "--database", db_url, "--json")
    (item,) = json.loads(run.out)["items"]
    assert item["scopes"] == ["submit", "read"] and item["revoked_at"] is None
    assert cli("tokens", "revoke", item["id"], "--database", db_url).code == 0
    assert assess(cli, http, files / "weekday.json", token=secret).code == 2
    run = cli("tokens", "revoke", item["id"], "--database", db_url)
    assert run.code == 2 and "no live token" in run.err


def test_database_url_from_the_environment(cli, db_url, app, monkeypatch):
    monkeypatch.setenv("PLUMBLINE_DATABASE_URL", db_url)
    run = cli("tokens", "create", "--scope", "admin", "--label", "first")
    assert run.code == 0, run.err
    assert "first" in cli("tokens", "list").out


def test_db_upgrade_then_tokens_on_a_new_database(cli, tmp_path):
    url = f"sqlite:///{tmp_path / 'new.db'}"
    run = cli("tokens", "list", "--database", url)
    assert run.code == 2 and "plumbline db upgrade" in run.err
    assert not (tmp_path / "new.db").exists()
    (tmp_path / "new.db").touch()  # a file, but no tables in it
    run = cli("tokens", "list", "--database", url)
    assert run.code == 2 and "no Plumbline tables" in run.err
    run = cli("db", "upgrade", "--database", url)
    assert run.code == 0 and "database upgraded" in run.out
    assert cli("tokens", "list", "--database", url).out == "no tokens\n"


def test_unreachable_database_exits_3(cli):
    url = f"postgresql+psycopg://postgres@127.0.0.1:{closed_port()}/test?connect_timeout=2"
    run = cli("tokens", "list", "--database", url)
    assert run.code == 3 and "cannot reach the database" in run.err
    run = cli("db", "upgrade", "--database", url)
    assert run.code == 3 and "cannot reach the database" in run.err


def test_bad_database_url_exits_2(cli):
    run = cli("tokens", "list", "--database", "nonsense://x")
    assert run.code == 2 and "--database" in run.err and len(run.err.splitlines()) == 1


def test_serve_calls_the_server_runner(cli, monkeypatch):
    calls = []
    monkeypatch.setattr("service.api.server.run", lambda **kw: calls.append(kw))
    assert cli("serve", "--port", "8123", "--workers", "2").code == 0
    assert cli("serve").code == 0
    assert calls == [
        {"host": "127.0.0.1", "port": 8123, "workers": 2},
        {"host": "127.0.0.1", "port": 8000, "workers": 1},
    ]


def test_a_rerun_with_the_same_idempotency_key_stores_once(cli, http, files):
    first = assess(cli, http, files / "stale.json", "--idempotency-key", "pipeline-8812")
    again = assess(cli, http, files / "stale.json", "--idempotency-key", "pipeline-8812")
    assert first.code == again.code == 1
    assert "stored earlier under the same Idempotency-Key" in again.out
    assert len(stored(http)) == 1
    other = assess(cli, http, files / "weekday.json", "--idempotency-key", "pipeline-8812")
    assert other.code == 2 and "409" in other.err


def test_client_reads_back_what_it_stored(http, files):
    client = PlumblineClient(URL, token=ADMIN, http=http)
    first = client.assess(json.loads((files / "stale.json").read_text()))
    second = client.assess(json.loads((files / "weekday.json").read_text()))
    page = client.list_assessments(limit=1)
    assert [r.id for r in page.items] == [second.id] and page.next_cursor is not None
    rest = client.list_assessments(limit=1, cursor=page.next_cursor)
    (row,) = rest.items
    assert (row.id, row.verdict, row.n_series, row.n_failed) == (first.id, "fail", 24, 24)
    assert row.policy.name == "default"
    assert client.list_assessments(verdict="pass").items[0].id == second.id
    again = client.assessment(first.id)
    assert again.verdict == "fail" and again.reasons == first.reasons


def test_tokens_on_each_database_backend(cli, migrated_url):
    """``migrated_url`` (tests/conftest.py): a fresh migrated SQLite file and PostgreSQL schema."""
    run = cli(
        "tokens",
        "create",
        "--scope",
        "admin",
        "--label",
        "first-admin",
        "--database",
        migrated_url,
        "--json",
    )
    assert run.code == 0, run.err
    created = json.loads(run.out)
    assert len(created["token"]) > 20 and created["scopes"] == ["admin"]
    listing = json.loads(cli("tokens", "list", "--database", migrated_url, "--json").out)
    assert [t["id"] for t in listing["items"]] == [created["id"]]
    assert cli("tokens", "revoke", created["id"], "--database", migrated_url).code == 0
    listing = json.loads(cli("tokens", "list", "--database", migrated_url, "--json").out)
    assert listing["items"][0]["revoked_at"] is not None


def test_the_printed_report_link_opens_without_a_token(cli, http, files):
    run = assess(cli, http, files / "stale.json")
    (line,) = [x for x in run.out.splitlines() if x.startswith("report:")]
    url = line.split(None, 1)[1]
    page = http.get(url)  # no Authorization header: the signature is the permission
    assert page.status_code == 200 and page.headers["content-type"].startswith("text/html")


def test_a_token_without_read_scope_gets_no_link_and_no_noise(cli, http, files):
    made = json.loads(
        cli(
            "tokens",
            "create",
            "--scope",
            "submit",
            "--label",
            "submit-only",
            "--server",
            URL,
            "--token",
            ADMIN,
            "--json",
            http=http,
        ).out
    )
    run = assess(cli, http, files / "weekday.json", token=made["token"])
    assert run.code == 0 and "report:" not in run.out and run.err == ""


def _burn_ins(printed: str) -> set[int]:
    result = json.loads(printed)
    return {
        c["details"]["burn_in"]
        for s in result["series"]
        for c in s["checks"]
        if c["name"] == "data_sufficiency"
    }


@pytest.mark.parametrize("extra", [(), ("--label", "run=9")])
def test_burn_in_option_reaches_the_service(cli, http, files, extra):
    # CSV as a CSV upload (?burn_in=2), and with a label as the JSON body it becomes.
    csv_opts = ("--model", "weekday", "--version", "1", "--season-length", "7")
    run = assess(cli, http, files / "weekday.csv", *csv_opts, "--burn-in", "2", "--json", *extra)
    assert run.code in (0, 1), run.err
    assert _burn_ins(run.out) == {2}


def test_burn_in_option_offline_and_on_json(cli, http, files):
    online = assess(cli, http, files / "weekday.json", "--burn-in", "3", "--json")
    offline = cli("assess", str(files / "weekday.json"), "--offline", "--burn-in", "3", "--json")
    assert _burn_ins(online.out) == _burn_ins(offline.out) == {3}
    n_obs = [s["n_obs"] for s in json.loads(online.out)["series"]]
    assert n_obs == [s["n_obs"] for s in json.loads(offline.out)["series"]]
    bad = cli("assess", str(files / "weekday.json"), "--offline", "--burn-in", "-1")
    assert bad.code == 2


def test_client_lists_the_models(cli, http, files):
    for name in ("weekday.json", "stale.json"):
        assert assess(cli, http, files / name).code in (0, 1)
    client = PlumblineClient(token=ADMIN, http=http)
    rows = client.models()
    by_model = {r.model: r for r in rows}
    latest = {s["model"]: s for s in reversed(stored(http))}  # the newest of each model
    assert set(by_model) == set(latest)
    for model, row in by_model.items():
        assert row.assessment_id == latest[model]["id"]
        assert row.verdict == latest[model]["verdict"]
        assert row.n_passed + row.n_warned + row.n_failed == row.n_series
    failing = client.models(verdict="fail")
    assert [r.verdict for r in failing] == ["fail"] * len(failing) and failing
