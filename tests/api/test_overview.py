"""BI rows: the list CSV's labels and per-status counts, and the estate of models."""

from __future__ import annotations

import csv
import io

from .helpers import ADMIN, white_noise_series

CSV_ACCEPT = {**ADMIN, "Accept": "text/csv"}


def post(client, model, version, *, bias=0.0, n=4, labels=None):
    doc = {
        "model": model,
        "version": version,
        "labels": labels or {},
        # Invented fleet: white noise, shifted by `bias` residual sds on the first two series.
        "series": [
            white_noise_series(f"s{i}", seed=i, bias=bias if i < 2 else 0.0) for i in range(n)
        ],
    }
    r = client.post("/v1/assessments", json=doc, headers=ADMIN)
    assert r.status_code == 201, r.text
    return r.json()


def counted(doc):
    """Series by verdict and checks by fleet status, counted on the stored result itself."""
    verdicts = [s["verdict"] for s in doc["series"]]
    return {
        "n_passed": verdicts.count("pass"),
        "n_warned": verdicts.count("warn"),
        "n_failed": verdicts.count("fail"),
        "checks_failed": [c["name"] for c in doc["checks"] if c["status"] == "fail"],
        "checks_warned": [c["name"] for c in doc["checks"] if c["status"] == "warn"],
    }


def rows_of(text):
    return list(csv.DictReader(io.StringIO(text)))


def test_list_csv_has_labels_and_per_status_counts(client):
    sound = post(client, "loaves", "1", labels={"team": "ovens", "run": "41"})
    biased = post(client, "loaves", "2", bias=2.0, labels={"team": "ovens"})
    r = client.get("/v1/assessments", headers=CSV_ACCEPT)
    assert r.status_code == 200
    rows = rows_of(r.text)
    assert [row["id"] for row in rows] == [biased["id"], sound["id"]]
    assert list(rows[0])[-2:] == ["label.run", "label.team"]
    assert rows[0]["label.team"] == "ovens" and rows[0]["label.run"] == ""
    assert rows[1]["label.run"] == "41"
    for row, doc in zip(rows, (biased, sound), strict=True):
        want = counted(doc)
        for key in ("n_passed", "n_warned", "n_failed"):
            assert int(row[key]) == want[key], key
        assert row["checks_failed"].split() == want["checks_failed"]
        assert row["checks_warned"].split() == want["checks_warned"]
        assert int(row["n_checks_failed"]) == len(want["checks_failed"])
        assert int(row["n_series"]) == 4
    assert "bias" in rows[0]["checks_failed"].split()  # 2 sd of bias on half the fleet


def test_models_lists_every_model_with_its_latest_assessment(client):
    post(client, "loaves", "1", labels={"team": "ovens"})
    latest = post(client, "loaves", "2", bias=2.0, labels={"team": "ovens"})
    post(client, "loaves", "2")  # a repeat of version 2 ...
    newest = post(client, "loaves", "3", bias=2.0)  # ... and then version 3
    rolls = post(client, "rolls", "7", labels={"team": "counter"})
    r = client.get("/v1/models", headers=ADMIN)
    assert r.status_code == 200
    items = r.json()["items"]
    assert [i["model"] for i in items] == ["loaves", "rolls"]
    loaves, rolls_row = items
    assert loaves["version"] == "3" and loaves["assessment_id"] == newest["id"]
    assert loaves["verdict"] == newest["verdict"] == "fail"
    assert loaves["created_at"] == newest["created_at"]
    assert loaves["n_assessments"] == 4 and loaves["n_versions"] == 3
    assert loaves["labels"] == {}
    want = counted(newest)
    assert {k: loaves[k] for k in want} == want
    assert rolls_row["assessment_id"] == rolls["id"] and rolls_row["labels"] == {"team": "counter"}
    assert latest["id"] != loaves["assessment_id"]
    # Only the models whose latest verdict is pass.
    r = client.get("/v1/models", params={"verdict": "pass"}, headers=ADMIN)
    assert [i["model"] for i in r.json()["items"]] == ["rolls"]


def test_models_as_csv_and_etag(client):
    post(client, "loaves", "1", labels={"team": "ovens"})
    r = client.get("/v1/models", headers=CSV_ACCEPT)
    assert r.headers["content-type"].startswith("text/csv")
    (row,) = rows_of(r.text)
    assert row["model"] == "loaves" and row["label.team"] == "ovens"
    assert row["n_assessments"] == "1" and row["policy_name"] == "default"
    tag = client.get("/v1/models", headers=ADMIN).headers["etag"]
    again = client.get("/v1/models", headers={**ADMIN, "If-None-Match": tag})
    assert again.status_code == 304
    post(client, "rolls", "1")
    changed = client.get("/v1/models", headers={**ADMIN, "If-None-Match": tag})
    assert changed.status_code == 200 and len(changed.json()["items"]) == 2


def test_models_is_empty_without_assessments_and_needs_read(client, token):
    r = client.get("/v1/models", headers=ADMIN)
    assert r.status_code == 200 and r.json() == {"items": []}
    assert client.get("/v1/models").status_code == 401
    assert client.get("/v1/models", headers=token("submit")).status_code == 403
