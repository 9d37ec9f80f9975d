"""``?series=all|flagged|none``: answers sized to the question, the same verdict and figures.

The reference is the full answer (``series=all``, the default, itself tested against
statsmodels elsewhere): a partial answer must equal it but for the rows it leaves out.
"""

from __future__ import annotations

import numpy as np
import pytest

from service.core import make_batch
from service.core.gate import assess_many_results
from service.core.policy import default_policy
from service.results import AssessmentDocument

from .helpers import ADMIN


def mixed(body):
    """Four series passing, two biased (failing), one autocorrelated."""
    b = body(n=4)
    more = body(n=3, bias=2.5)["series"][:2] + body(n=1, phi=0.7)["series"]
    for k, s in enumerate(more):
        s["id"] = f"flawed-{k}"
    b["series"] += more
    return b


def without(doc: dict, *keys: str) -> dict:
    return {k: v for k, v in doc.items() if k not in keys}


@pytest.mark.parametrize("store", ["true", "false"])
def test_views_of_a_post_equal_the_full_answer_but_for_the_rows(client, body, store):
    b = mixed(body)
    full = client.post(f"/v1/assessments?store={store}", json=b, headers=ADMIN).json()
    flagged_rows = [s for s in full["series"] if s["verdict"] != "pass"]
    assert 0 < len(flagged_rows) < len(full["series"])
    for shown, rows in (("flagged", flagged_rows), ("none", [])):
        r = client.post(f"/v1/assessments?store={store}&series={shown}", json=b, headers=ADMIN)
        assert r.status_code == (201 if store == "true" else 200), r.text
        doc = r.json()
        assert doc["series_shown"] == shown
        assert list(doc)[-2:] == ["series_shown", "series"]
        assert doc["series"] == rows
        ignore = ("id", "created_at", "series", "series_shown")
        assert without(doc, *ignore) == without(full, *ignore)
        read = AssessmentDocument.from_dict(doc)
        assert read.n_series == len(full["series"]) == read.fleet.n_series
        assert read.count("fail") == sum(s["verdict"] == "fail" for s in full["series"])
        assert read.extra["series_shown"] == shown


def test_default_and_all_keep_todays_answer(client, body):
    b = body(n=2)
    plain = client.post("/v1/assessments?store=false", json=b, headers=ADMIN).json()
    every = client.post("/v1/assessments?store=false&series=all", json=b, headers=ADMIN).json()
    assert "series_shown" not in plain
    assert without(every, "created_at") == without(plain, "created_at")


def test_views_of_a_stored_assessment(client, body):
    doc = client.post("/v1/assessments", json=mixed(body), headers=ADMIN).json()
    path = f"/v1/assessments/{doc['id']}"
    assert client.get(path, headers=ADMIN).json() == doc
    assert client.get(f"{path}?series=all", headers=ADMIN).json() == doc
    flagged = client.get(f"{path}?series=flagged", headers=ADMIN)
    none = client.get(f"{path}?series=none", headers=ADMIN)
    assert flagged.json()["series"] == [s for s in doc["series"] if s["verdict"] != "pass"]
    assert none.json()["series"] == []
    assert without(none.json(), "series", "series_shown") == without(doc, "series")
    # Each view has its own ETag.
    tags = {
        client.get(f"{path}?series={v}", headers=ADMIN).headers["etag"]
        for v in ("all", "flagged", "none")
    }
    assert len(tags) == 3
    again = client.get(
        f"{path}?series=none", headers={**ADMIN, "If-None-Match": none.headers["etag"]}
    )
    assert again.status_code == 304


def test_an_idempotent_replay_answers_in_the_view_asked_for(client, body):
    b = mixed(body)
    headers = {**ADMIN, "Idempotency-Key": "views-1"}
    first = client.post("/v1/assessments?series=none", json=b, headers=headers)
    again = client.post("/v1/assessments?series=flagged", json=b, headers=headers)
    assert first.status_code == 201 and again.status_code == 200
    assert first.json()["series"] == []
    assert again.json()["series"] and all(s["verdict"] != "pass" for s in again.json()["series"])
    stored = client.get(f"/v1/assessments/{first.json()['id']}", headers=ADMIN).json()
    assert len(stored["series"]) == len(b["series"])  # stored whole whatever the view


@pytest.mark.parametrize("path", ["/v1/assessments", "/v1/assessments/{id}"])
@pytest.mark.parametrize("value", ["some", "", "ALL", "flagged,none"])
def test_unknown_views_are_422_naming_series(client, body, path, value):
    doc = client.post("/v1/assessments", json=body(n=1), headers=ADMIN).json()
    url = path.format(id=doc["id"]) + f"?series={value}"
    r = client.post(url, json=body(n=1), headers=ADMIN) if "{" not in path else None
    if r is None:
        r = client.get(url, headers=ADMIN)
    assert r.status_code == 422
    assert r.json()["errors"] == [
        {"loc": "query.series", "message": "must be one of all, flagged, none"}
    ]


def test_the_gate_builds_only_the_rows_shown():
    """Stacked parts with different views: each result's rows are its own, and the columns
    built hold only the rows shown."""
    rng = np.random.default_rng(11)
    e = rng.normal(0.0, 1.0, (3, 4, 80))
    e[:, 0] += 2.0  # the first series of each part is biased
    policy = default_policy()
    parts = [
        (make_batch(10 + e[g], np.full((4, 80), 10.0), ids=[f"p{g}-{i}" for i in range(4)]), policy)
        for g in range(3)
    ]
    full = assess_many_results(parts)
    sized = assess_many_results(parts, ["none", "flagged", "all"])
    assert len(sized[0].series) == 0
    assert sized[1].series.to_dicts() == [
        s for s in full[1].series.to_dicts() if s["verdict"] != "pass"
    ]
    assert sized[2].series.to_dicts() == full[2].series.to_dicts()
    assert len(sized[1].series.columns) == len(sized[1].series) + 4  # only the rows shown
    for a, b in zip(full, sized, strict=True):
        assert (a.verdict, a.reasons, a.checks, a.fleet) == (
            b.verdict,
            b.reasons,
            b.checks,
            b.fleet,
        )
    with pytest.raises(ValueError, match="shown"):
        assess_many_results(parts, ["some", "all", "all"])
