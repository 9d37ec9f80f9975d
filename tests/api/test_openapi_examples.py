"""Each request example of openapi_examples/ posted to the service answers as its recorded
response says (verdict, or status and the fields named)."""

from __future__ import annotations

from pathlib import Path

import orjson
import pytest

from service.api.openapi import load_examples

from .helpers import ADMIN

EXAMPLES = load_examples(Path(__file__).resolve().parents[2] / "openapi_examples")


def test_the_examples_cover_the_scenarios():
    names = {e["name"] for e in EXAMPLES}
    assert {"sound-model", "biased-model", "seasonal-miss", "csv-upload", "invalid-body"} <= names
    verdicts = {e["name"]: e.get("verdict") for e in EXAMPLES}
    assert verdicts["biased-model"] == "fail" and verdicts["seasonal-miss"] == "fail"


@pytest.mark.parametrize("example", EXAMPLES, ids=[e["name"] for e in EXAMPLES])
def test_posting_an_example_gives_its_recorded_answer(client, example):
    query = "?" + example["query"] if example.get("query") else ""
    if example["request"].endswith(".csv"):
        r = client.post(
            f"/v1/assessments{query}",
            content=example["request_body"].encode(),
            headers={**ADMIN, "Content-Type": "text/csv"},
        )
    else:
        r = client.post(
            f"/v1/assessments{query}",
            content=orjson.dumps(example["request_body"]),
            headers={**ADMIN, "Content-Type": "application/json"},
        )
    assert r.status_code == example["status"], r.text
    got, recorded = r.json(), example["response_body"]
    if example["status"] >= 400:
        assert got["errors"] == recorded["errors"]
        return
    assert got["verdict"] == example["verdict"] == recorded["verdict"]
    assert got["reasons"] == recorded["reasons"]
    assert [s["verdict"] for s in got["series"]] == [s["verdict"] for s in recorded["series"]]


def test_the_bias_example_fails_on_bias_and_the_seasonal_one_on_autocorrelation():
    by_name = {e["name"]: e["response_body"] for e in EXAMPLES}

    def status(name, check):
        return next(c["status"] for c in by_name[name]["checks"] if c["name"] == check)

    assert status("biased-model", "bias") == "fail"
    assert status("seasonal-miss", "ljung_box") == "fail"
    assert status("sound-model", "bias") == "pass"
    assert status("sound-model", "ljung_box") == "pass"
