"""``plumbline assess --baseline`` against the real service in-process (fresh SQLite database
per test): a version less accurate than its baseline fails with the exit code of any failing
verdict; a baseline the service cannot use is bad input (exit 2); offline has no baseline.
The fleets are invented (tests/api/baseline_helpers.py)."""

from __future__ import annotations

import json

import httpx
import pytest
from cli_helpers import AppTransport

from tests.api.baseline_helpers import fleet

URL = "http://testserver"
ADMIN = "admin-secret-for-tests"


@pytest.fixture
def http(tmp_path):
    from service.api.app import create_app
    from service.settings import Settings

    app = create_app(Settings(database_url=f"sqlite:///{tmp_path / 'p.db'}", admin_token=ADMIN))
    transport = AppTransport(app)
    with httpx.Client(transport=transport, base_url=URL) as client:
        yield client
    transport.close()


@pytest.fixture(autouse=True)
def _no_sleep(monkeypatch):
    monkeypatch.setattr("time.sleep", lambda seconds: None)


def write(tmp_path, name, body):
    path = tmp_path / name
    path.write_text(json.dumps(body))
    return path


def assess(cli, http, path, *extra):
    return cli("assess", str(path), "--server", URL, "--token", ADMIN, *extra, http=http)


def test_a_less_accurate_version_exits_1_like_any_failing_verdict(cli, http, tmp_path):
    assert assess(cli, http, write(tmp_path, "v1.json", fleet("2026.11"))).code == 0
    worse = write(tmp_path, "v2.json", fleet("2026.12", extra_sd=3.0, version_seed=1))
    run = assess(cli, http, worse, "--baseline", "latest-pass", "--json")
    assert run.code == 1, run.err
    doc = json.loads(run.out)
    assert doc["verdict"] == "fail" and doc["baseline"]["version"] == "2026.11"
    # Without the baseline the same file passes: the comparison is what blocks it.
    assert assess(cli, http, worse).code == 0


def test_an_equally_sound_version_passes_against_its_baseline(cli, http, tmp_path):
    assert assess(cli, http, write(tmp_path, "v1.json", fleet("2026.11"))).code == 0
    # The same forecasts under a new version: nothing is less accurate.
    run = assess(cli, http, write(tmp_path, "v2.json", fleet("2026.12")), "--baseline", "2026.11")
    assert run.code == 0, run.out + run.err


def test_a_baseline_the_service_refuses_exits_2_naming_the_field(cli, http, tmp_path):
    run = assess(cli, http, write(tmp_path, "v2.json", fleet("2026.12")), "--baseline", "1999.01")
    assert run.code == 2
    assert "baseline.version" in run.err


def test_csv_input_sends_the_baseline_as_a_query_parameter(cli, http, tmp_path):
    assert assess(cli, http, write(tmp_path, "v1.json", fleet("2026.11"))).code == 0
    body = fleet("2026.12")
    lines = ["series_id,timestamp,actual,fitted,part"]
    for s in body["series"]:
        for t, a, f in zip(s["timestamps"], s["actuals"], s["fitted"], strict=True):
            lines.append(f"{s['id']},{t},{a},{f},train")
        h = s["holdout"]
        for t, a, f in zip(h["timestamps"], h["actuals"], h["forecasts"], strict=True):
            lines.append(f"{s['id']},{t},{a},{f},holdout")
    path = tmp_path / "v2.csv"
    path.write_text("\n".join(lines) + "\n")
    run = assess(
        cli,
        http,
        path,
        "--model",
        "crumb-counts",
        "--version",
        "2026.12",
        "--baseline",
        "2026.11",
        "--json",
    )
    assert run.code == 0, run.err
    assert json.loads(run.out)["baseline"]["matched_series"] == 30


def test_offline_has_no_baseline(cli, tmp_path):
    run = cli(
        "assess",
        str(write(tmp_path, "v2.json", fleet("2026.12"))),
        "--offline",
        "--baseline",
        "2026.11",
    )
    assert run.code == 2 and "--offline" in run.err


def test_the_printed_result_says_what_it_was_compared_with(cli, http, tmp_path):
    assert assess(cli, http, write(tmp_path, "v1.json", fleet("2026.11"))).code == 0
    ids = [f"dock-{i:02d}" for i in range(2, 32)]
    body = fleet("2026.12", ids=ids, extra_sd=3.0, version_seed=1)
    run = assess(cli, http, write(tmp_path, "v2.json", body), "--baseline", "latest-pass")
    assert run.code == 1
    (line,) = [x for x in run.out.splitlines() if x.startswith("against:")]
    assert line.startswith("against: version 2026.11 (latest-pass), assessment ")
    assert line.endswith(
        "28 series, 336 holdout periods matched; 2 series without a baseline, "
        "2 baseline series not in this version"
    )


def test_the_python_client_reads_the_comparison_and_the_verdicts_baseline(http):
    from service.client import PlumblineClient

    with PlumblineClient(URL, token=ADMIN, http=http) as client:
        client.assess(fleet("2026.11"))
        client.assess(fleet("2026.12", extra_sd=3.0, version_seed=1, baseline="2026.11"))
        verdict = client.verdict("crumb-counts")
        assert verdict.verdict == "fail" and verdict.baseline["version"] == "2026.11"
        compared = client.compare("crumb-counts", a="2026.11", b="2026.12")
        assert compared["fleet"] == verdict.baseline["fleet"]
        assert len(compared["series"]) == 30
