"""Reading results: the list (filters, order, cursor, CSV, ETag), one assessment, its series
rows, and the latest verdict per model."""

from __future__ import annotations

import csv
import io
from datetime import UTC, datetime, timedelta

import pytest

from service.api.csvout import to_csv
from service.core import CHECK_NAMES
from service.core.registry import all_checks

from .helpers import ADMIN


def post(client, body, **kw):
    r = client.post("/v1/assessments", json=body(**kw), headers=ADMIN)
    assert r.status_code == 201, r.text
    return r.json()


def test_list_is_newest_first_with_summary_rows(client, body):
    first = post(client, body, n=1, version="1")
    second = post(client, body, n=2, version="2", bias=3.0)
    items = client.get("/v1/assessments", headers=ADMIN).json()["items"]
    assert [i["id"] for i in items] == [second["id"], first["id"]]
    row = items[0]
    assert set(row) >= {
        "id",
        "created_at",
        "model",
        "version",
        "verdict",
        "n_series",
        "n_failed",
        "n_warned",
        "policy",
    }
    assert row["n_series"] == 2 and row["verdict"] == "fail" and row["n_failed"] == 2
    assert row["policy"] == {"name": "default", "version": 1}


def test_list_filters(client, body):
    a = post(client, body, n=1, model="rye", version="1")
    b = post(client, body, n=1, model="rye", version="2", bias=3.0)
    c = post(client, body, n=1, model="sourdough", version="1")

    def ids(query):
        r = client.get(f"/v1/assessments?{query}", headers=ADMIN)
        assert r.status_code == 200, r.text
        return [i["id"] for i in r.json()["items"]]

    assert ids("model=rye") == [b["id"], a["id"]]
    assert ids("model=rye&version=1") == [a["id"]]
    newest_first = (c, b, a)
    for verdict in ("pass", "warn", "fail"):
        assert ids(f"verdict={verdict}") == [
            x["id"] for x in newest_first if x["verdict"] == verdict
        ]
    assert b["id"] in ids("verdict=fail")
    now = datetime.now(UTC)
    assert set(ids(f"since={(now - timedelta(hours=1)).isoformat()}".replace("+", "%2B"))) == {
        a["id"],
        b["id"],
        c["id"],
    }
    assert ids(f"since={(now + timedelta(hours=1)).isoformat()}".replace("+", "%2B")) == []
    assert ids(f"until={(now - timedelta(hours=1)).isoformat()}".replace("+", "%2B")) == []
    assert ids("until=2999-01-01") != []


def test_cursor_pagination_walks_every_row_once(client, body):
    made = [post(client, body, n=1, version=str(i))["id"] for i in range(5)]
    seen, cursor = [], None
    pages = 0
    while True:
        url = "/v1/assessments?limit=2" + (f"&cursor={cursor}" if cursor else "")
        r = client.get(url, headers=ADMIN)
        doc = r.json()
        seen += [i["id"] for i in doc["items"]]
        pages += 1
        cursor = doc["next_cursor"]
        if cursor is None:
            break
        assert 'rel="next"' in r.headers["link"]
    assert seen == made[::-1]
    assert pages == 3


@pytest.mark.parametrize(
    ("query", "loc"),
    [
        ("cursor=garbage!", "query.cursor"),
        ("limit=0", "query.limit"),
        ("limit=100000", "query.limit"),
        ("verdict=maybe", "query.verdict"),
        ("since=yesterday", "query.since"),
    ],
)
def test_bad_list_parameters_are_422(client, query, loc):
    r = client.get(f"/v1/assessments?{query}", headers=ADMIN)
    assert r.status_code == 422
    assert r.headers["content-type"] == "application/problem+json"
    assert r.json()["errors"][0]["loc"] == loc


def test_list_as_csv(client, body):
    a = post(client, body, n=2)
    r = client.get("/v1/assessments", headers={**ADMIN, "Accept": "text/csv"})
    assert r.status_code == 200
    assert r.headers["content-type"].startswith("text/csv")
    rows = list(csv.DictReader(io.StringIO(r.text)))
    assert rows[0]["id"] == a["id"] and rows[0]["n_series"] == "2"
    assert set(rows[0]) == {
        "id",
        "created_at",
        "model",
        "version",
        "verdict",
        "n_series",
        "n_passed",
        "n_failed",
        "n_warned",
        "n_checks_failed",
        "n_checks_warned",
        "checks_failed",
        "checks_warned",
        "policy_name",
        "policy_version",
        "label.run",
    }


def test_csv_cells_that_look_like_formulas_are_escaped(client, body):
    post(client, body, n=1, model='=HYPERLINK("x")', version="-1+2")
    post(client, body, n=1, model="@SUM(A1)", version="+3")
    r = client.get("/v1/assessments", headers={**ADMIN, "Accept": "text/csv"})
    rows = list(csv.DictReader(io.StringIO(r.text)))
    assert rows[0]["model"] == "'@SUM(A1)" and rows[0]["version"] == "'+3"
    assert rows[1]["model"] == '\'=HYPERLINK("x")' and rows[1]["version"] == "'-1+2"


def test_csv_numbers_stay_numeric_and_text_is_escaped():
    out = to_csv(["a", "b", "c", "d"], [[-1.5, "-1.5", "=1", 3]]).decode()
    assert out.splitlines()[1] == "-1.5,'-1.5,'=1,3"


def test_negative_statistics_are_written_as_numbers(client, body):
    a = post(client, body, n=3)
    negative = [
        c["statistic"]
        for s in a["series"]
        for c in s["checks"]
        if c["statistic"] is not None and c["statistic"] < 0
    ]
    assert negative, "the bias t statistics of these series include negative ones"
    r = client.get(f"/v1/assessments/{a['id']}/series", headers={**ADMIN, "Accept": "text/csv"})
    cells = [row["statistic"] for row in csv.DictReader(io.StringIO(r.text))]
    assert repr(negative[0]) in cells


def test_etag_gives_304_until_something_changes(client, body):
    post(client, body, n=1)
    r = client.get("/v1/assessments", headers=ADMIN)
    tag = r.headers["etag"]
    again = client.get("/v1/assessments", headers={**ADMIN, "If-None-Match": tag})
    assert again.status_code == 304 and again.content == b""
    assert again.headers["etag"] == tag
    post(client, body, n=1)
    changed = client.get("/v1/assessments", headers={**ADMIN, "If-None-Match": tag})
    assert changed.status_code == 200 and changed.headers["etag"] != tag
    csv_tag = client.get("/v1/assessments", headers={**ADMIN, "Accept": "text/csv"}).headers["etag"]
    assert csv_tag != changed.headers["etag"]


def test_get_one_and_its_etag(client, body):
    a = post(client, body, n=2)
    r = client.get(f"/v1/assessments/{a['id']}", headers=ADMIN)
    assert r.status_code == 200 and r.json() == a
    assert (
        client.get(
            f"/v1/assessments/{a['id']}", headers={**ADMIN, "If-None-Match": r.headers["etag"]}
        ).status_code
        == 304
    )


def test_unknown_assessment_is_404(client):
    for path in ("/v1/assessments/nope", "/v1/assessments/nope/series"):
        r = client.get(path, headers=ADMIN)
        assert r.status_code == 404
        assert r.headers["content-type"] == "application/problem+json"


def test_series_rows_one_per_series_and_check(client, body):
    a = post(client, body, n=3, holdout=6)
    r = client.get(f"/v1/assessments/{a['id']}/series", headers=ADMIN)
    assert r.status_code == 200
    items = r.json()["items"]
    expected = sum(len(s["checks"]) for s in a["series"])
    assert len(items) == expected
    # Every check but those that apply to some batches only (the baseline comparison).
    sometimes = {c.name for c in all_checks() if c.applies is not None}
    assert {i["check"] for i in items} == set(CHECK_NAMES) - sometimes
    first = items[0]
    assert set(first) >= {
        "assessment_id",
        "series_id",
        "series_verdict",
        "n_obs",
        "check",
        "status",
        "statistic",
        "p_value",
        "p_adjusted",
        "details",
    }
    lb = next(i for i in items if i["check"] == "ljung_box" and i["series_id"] == "s1")
    source = next(c for c in a["series"][1]["checks"] if c["name"] == "ljung_box")
    assert lb["statistic"] == source["statistic"] and lb["details"] == source["details"]
    only = client.get(f"/v1/assessments/{a['id']}/series?check=bias", headers=ADMIN).json()
    assert [i["series_id"] for i in only["items"]] == ["s0", "s1", "s2"]


def test_series_rows_as_csv(client, body):
    a = post(client, body, n=2)
    r = client.get(f"/v1/assessments/{a['id']}/series", headers={**ADMIN, "Accept": "text/csv"})
    assert r.headers["content-type"].startswith("text/csv")
    rows = list(csv.DictReader(io.StringIO(r.text)))
    assert len(rows) == sum(len(s["checks"]) for s in a["series"])
    assert rows[0]["assessment_id"] == a["id"]


def test_latest_verdict_and_require(client, body):
    post(client, body, n=1, model="rye", version="1")
    bad = post(client, body, n=2, model="rye", version="2", bias=3.0)
    r = client.get("/v1/models/rye/verdict", headers=ADMIN)
    assert r.status_code == 200
    doc = r.json()
    assert {k: doc[k] for k in ("model", "version", "verdict", "assessment_id")} == {
        "model": "rye",
        "version": "2",
        "verdict": "fail",
        "assessment_id": bad["id"],
    }
    assert doc["created_at"] == bad["created_at"]
    for level in ("pass", "warn"):
        refused = client.get(f"/v1/models/rye/verdict?require={level}", headers=ADMIN)
        assert refused.status_code == 412
        assert refused.headers["content-type"] == "application/problem+json"
        body412 = refused.json()
        assert body412["verdict"] == "fail" and body412["assessment_id"] == bad["id"]
        assert body412["status"] == 412


def test_require_met_is_200(client, body):
    one = post(client, body, n=1, model="rye", version="1")
    r = client.get("/v1/models/rye/verdict?version=1&require=warn", headers=ADMIN)
    expected = 200 if one["verdict"] in ("pass", "warn") else 412
    assert r.status_code == expected
    assert r.json()["verdict"] == one["verdict"]
    r = client.get("/v1/models/rye/verdict?version=1&require=pass", headers=ADMIN)
    assert r.status_code == (200 if one["verdict"] == "pass" else 412)


def test_model_names_with_slashes(client, body):
    post(client, body, n=1, model="bakery/rye", version="1")
    assert client.get("/v1/models/bakery/rye/verdict", headers=ADMIN).status_code == 200


def test_verdict_of_unknown_model_is_404(client, body):
    assert client.get("/v1/models/none/verdict", headers=ADMIN).status_code == 404
    post(client, body, n=1, model="rye", version="1")
    assert client.get("/v1/models/rye/verdict?version=9", headers=ADMIN).status_code == 404


def test_bad_require_is_422(client):
    r = client.get("/v1/models/rye/verdict?require=fail", headers=ADMIN)
    assert r.status_code == 422
    assert r.json()["errors"][0]["loc"] == "query.require"


def test_numbers_beyond_the_database_integers_are_422(client):
    import base64

    huge = base64.urlsafe_b64encode(b"before:99999999999999999999").decode().rstrip("=")
    r = client.get(f"/v1/assessments?cursor={huge}", headers=ADMIN)
    assert r.status_code == 422 and r.json()["errors"][0]["loc"] == "query.cursor"
    r = client.get("/v1/policies/default?version=99999999999999999999", headers=ADMIN)
    assert r.status_code == 422 and r.json()["errors"][0]["loc"] == "query.version"
