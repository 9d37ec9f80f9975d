"""Concurrent small submissions assessed together (service/api/batching.py).

Many POST /v1/assessments are sent at once, in process, and the submissions waiting at the
same moment are assessed in one pass. Each must still get exactly the answer it gets alone.

Every series here is invented: weekly footfall residuals at invented shop branches, white noise
or AR(1) around an invented seasonal level (``white_noise_series`` in tests/api/helpers.py),
some given a constant bias so that verdicts differ from one submission to the next. All are
drawn from seeded NumPy generators.

The per-series statistics of the batched answers are also checked against outside references:
the Ljung-Box Q against statsmodels' ``acorr_ljungbox`` and the Jarque-Bera statistic against
scipy's ``jarque_bera``, both on the residuals (actual - fitted) of the body.
"""

from __future__ import annotations

import asyncio
from collections.abc import AsyncIterator, Coroutine
from contextlib import asynccontextmanager
from typing import Any

import httpx
import numpy as np
import orjson
import pytest
import sqlalchemy.exc
from prometheus_client.parser import text_string_to_metric_families
from scipy import stats
from statsmodels.stats.diagnostic import acorr_ljungbox

from service.api import assessing
from service.api.app import create_app
from service.api.routers.assessments import INLINE_BODY_BYTES
from service.settings import Settings
from service.store import repository as repo

from .helpers import ADMIN, ADMIN_TOKEN, white_noise_series

# A guard against a hang (a future never resolved), not a speed check: generous on purpose.
HANG_GUARD_SECONDS = 120
PROBLEM_JSON = "application/problem+json"


# --- Harness ---------------------------------------------------------------------------------


def run(coro: Coroutine[Any, Any, Any]) -> Any:
    """Drive one scenario on a fresh event loop, bounded so that a hang fails the test."""
    return asyncio.run(asyncio.wait_for(coro, HANG_GUARD_SECONDS))


@asynccontextmanager
async def serving(database_url: str) -> AsyncIterator[tuple[Any, httpx.AsyncClient]]:
    """A fresh app on ``database_url`` with its lifespan running, and an in-process client."""
    app = create_app(
        Settings(database_url=database_url, admin_token=ADMIN_TOKEN, rate_limit_per_second=0)
    )
    async with app.router.lifespan_context(app):
        transport = httpx.ASGITransport(app=app)
        async with httpx.AsyncClient(
            transport=transport, base_url="http://plumbline.test"
        ) as client:
            yield app, client


def small(body: dict[str, Any]) -> dict[str, Any]:
    """``body``, after checking it is small enough to be handed to the batcher."""
    assert len(orjson.dumps(body)) <= INLINE_BODY_BYTES
    return body


def submission(
    prefix: str,
    n_series: int = 1,
    *,
    seeds: tuple[int, ...] | None = None,
    lengths: tuple[int, ...] | None = None,
    biases: tuple[float, ...] | None = None,
    phis: tuple[float, ...] | None = None,
    holdout: int = 0,
    **top: Any,
) -> dict[str, Any]:
    """An invented assessment body: ``n_series`` series named ``prefix-0``, ``prefix-1``, ..."""
    seeds = seeds or tuple(range(n_series))
    lengths = lengths or (104,) * n_series
    biases = biases or (0.0,) * n_series
    phis = phis or (0.0,) * n_series
    series = [
        white_noise_series(
            f"{prefix}-{i}",
            n=lengths[i],
            seed=seeds[i],
            bias=biases[i],
            phi=phis[i],
            holdout=holdout,
        )
        for i in range(n_series)
    ]
    return small(
        {
            "model": "footfall-weekly",
            "version": "3",
            "labels": {"scenario": "invented"},
            "series": series,
            **top,
        }
    )


async def post(
    client: httpx.AsyncClient, body: dict[str, Any], *, store: bool = True, key: str | None = None
) -> httpx.Response:
    headers = dict(ADMIN)
    if key is not None:
        headers["Idempotency-Key"] = key
    params = None if store else {"store": "false"}
    return await client.post("/v1/assessments", json=body, params=params, headers=headers)


async def post_all(
    client: httpx.AsyncClient, bodies: list[dict[str, Any]], **kw: Any
) -> list[httpx.Response]:
    """All of ``bodies`` at once (one gather), answers in the order of ``bodies``."""
    return list(await asyncio.gather(*(post(client, b, **kw) for b in bodies)))


async def listed_ids(client: httpx.AsyncClient) -> list[str]:
    r = await client.get("/v1/assessments", params={"limit": 500}, headers=ADMIN)
    assert r.status_code == 200, r.text
    assert r.json()["next_cursor"] is None
    return [item["id"] for item in r.json()["items"]]


def without_identity(doc: dict[str, Any]) -> dict[str, Any]:
    """An assessment document without what differs between two runs: its id and time."""
    assert {"verdict", "reasons", "checks", "fleet", "series"} <= set(doc)
    return {k: v for k, v in doc.items() if k not in ("id", "created_at")}


def series_ids(body: dict[str, Any]) -> tuple[str, ...]:
    return tuple(s["id"] for s in body["series"])


def batch_size_header(response: httpx.Response) -> int | None:
    """The ``batch;desc="N"`` entry of ``Server-Timing``, or ``None`` when there is none."""
    for part in response.headers["server-timing"].split(","):
        name, _, rest = part.strip().partition(";")
        if name == "batch":
            assert rest.startswith('desc="') and rest.endswith('"'), part
            return int(rest[len('desc="') : -1])
    return None


async def per_pass_histogram(client: httpx.AsyncClient) -> dict[str, float]:
    """``plumbline_submissions_per_pass`` as /metrics shows it: buckets, count and sum."""
    r = await client.get("/metrics", headers=ADMIN)
    assert r.status_code == 200
    for family in text_string_to_metric_families(r.text):
        if family.name == "plumbline_submissions_per_pass":
            out = {}
            for sample in family.samples:
                if sample.name.endswith("_bucket"):
                    out[f"le={sample.labels['le']}"] = sample.value
                else:
                    out[sample.name.rsplit("_", 1)[1]] = sample.value
            return out
    raise AssertionError("plumbline_submissions_per_pass is missing from /metrics")


@pytest.fixture
def passes(monkeypatch: pytest.MonkeyPatch) -> list[tuple[Any, list[tuple[str, ...]]]]:
    """Every pass the batcher makes: its engine and the series ids of each submission in it.

    Wraps the real ``run_many`` (the batcher looks it up on the module at each pass), so the
    answers are unchanged; only the grouping is recorded.
    """
    seen: list[tuple[Any, list[tuple[str, ...]]]] = []
    real = assessing.run_many

    def recording(engine: Any, jobs: list[assessing.Job]) -> list[Any]:
        seen.append((engine, [tuple(job.req.ids) for job in jobs]))
        return real(engine, jobs)

    monkeypatch.setattr(assessing, "run_many", recording)
    return seen


def passes_of(
    seen: list[tuple[Any, list[tuple[str, ...]]]], app: Any
) -> list[list[tuple[str, ...]]]:
    return [jobs for engine, jobs in seen if engine is app.state.store]


def pass_holding(
    groups: list[list[tuple[str, ...]]], ids: tuple[str, ...]
) -> list[tuple[str, ...]]:
    (found,) = [jobs for jobs in groups if ids in jobs]
    return found


async def alone(database_url: str, bodies: list[dict[str, Any]]) -> list[dict[str, Any]]:
    """What each body gets when posted alone: to a fresh app, one at a time."""
    out = []
    async with serving(database_url) as (_app, client):
        for body in bodies:
            r = await post(client, body)
            assert r.status_code == 201, r.text
            assert batch_size_header(r) is None  # it was assessed alone
            out.append(r.json())
    return out


def check(doc_series: dict[str, Any], name: str) -> dict[str, Any]:
    (found,) = [c for c in doc_series["checks"] if c["name"] == name]
    return found


def assert_matches_outside_references(body: dict[str, Any], doc: dict[str, Any]) -> None:
    """Ljung-Box Q and its p-value (statsmodels ``acorr_ljungbox``) and Jarque-Bera
    (scipy ``jarque_bera``) of each series, recomputed from the body's residuals."""
    for sent, got in zip(body["series"], doc["series"], strict=True):
        assert got["id"] == sent["id"]
        e = np.asarray(sent["actuals"]) - np.asarray(sent["fitted"])
        lb = check(got, "ljung_box")["details"]
        # The classical Ljung-Box figures in the autocorrelation check's details; model_df:
        # the degrees of freedom the model's estimated parameters take from Q.
        ref = acorr_ljungbox(e, lags=[lb["classical_lags"]], model_df=body.get("model_params", 0))
        assert lb["ljung_box"] == pytest.approx(float(ref["lb_stat"].iloc[0]), rel=1e-9)
        assert lb["ljung_box_p_value"] == pytest.approx(float(ref["lb_pvalue"].iloc[0]), rel=1e-9)
        normal = check(got, "jarque_bera")
        assert normal["details"]["jarque_bera"] == pytest.approx(
            stats.jarque_bera(e).statistic, rel=1e-9
        )
        # The test itself: Shapiro-Wilk (scipy's constants are single precision).
        assert normal["statistic"] == pytest.approx(stats.shapiro(e).statistic, rel=1e-7)


# --- 1. Same-shaped single-series submissions ------------------------------------------------


def twelve_branches() -> list[dict[str, Any]]:
    """Twelve invented branches, one series each, same length; a third biased, some AR(1)."""
    return [
        submission(
            f"branch{i:02d}",
            seeds=(9100 + i,),
            biases=(1.2 * (i % 3 == 2),),
            phis=(0.5 * (i % 4 == 1),),
        )
        for i in range(12)
    ]


def test_concurrent_single_series_are_batched_and_answer_as_alone(database_url, passes):
    bodies = twelve_branches()
    reference = run(alone(database_url, bodies))
    # The scenario gives different answers, so a result handed to the wrong submission shows.
    assert len({doc["verdict"] for doc in reference}) > 1

    async def scenario() -> None:
        async with serving(database_url) as (app, client):
            responses = await post_all(client, bodies)
            assert [r.status_code for r in responses] == [201] * 12, [r.text for r in responses]

            histogram = await per_pass_histogram(client)
            assert histogram["sum"] == 12  # each submission counted in exactly one pass
            assert histogram["count"] - histogram["le=1.0"] >= 1  # a pass held several

            groups = passes_of(passes, app)
            assert sorted(ids for jobs in groups for ids in jobs) == sorted(
                series_ids(b) for b in bodies
            )
            assert max(len(jobs) for jobs in groups) > 1
            for body, r in zip(bodies, responses, strict=True):
                size = len(pass_holding(groups, series_ids(body)))
                assert batch_size_header(r) == (size if size > 1 else None)

            for body, r, expected in zip(bodies, responses, reference, strict=True):
                doc = r.json()
                got = await client.get(f"/v1/assessments/{doc['id']}", headers=ADMIN)
                assert got.status_code == 200, got.text
                assert got.json() == doc  # read back as answered
                assert without_identity(got.json()) == without_identity(expected)
                assert_matches_outside_references(body, got.json())

    run(scenario())


# --- 2. Mixed shapes ---------------------------------------------------------------------------


def mixed_shapes() -> list[dict[str, Any]]:
    """Invented submissions of different shapes: lengths, a holdout with 95% intervals,
    several series of different lengths, a seasonal period and model parameters."""
    return [
        submission("kiosk", lengths=(40,), seeds=(501,)),
        submission("arcade", lengths=(156,), seeds=(502,), holdout=13),
        submission(
            "mall",
            4,
            seeds=(503, 504, 505, 506),
            lengths=(104, 90, 104, 70),
            biases=(0.0, 1.5, 0.0, 0.0),
            phis=(0.0, 0.0, 0.6, 0.0),
        ),
        submission(
            "depot", lengths=(80,), seeds=(507,), phis=(0.4,), season_length=4, model_params=2
        ),
        submission("station", 2, seeds=(508, 509), lengths=(120, 120), holdout=8),
    ]


def test_mixed_shapes_in_one_gather_answer_as_alone(database_url, passes):
    bodies = mixed_shapes()
    reference = run(alone(database_url, bodies))
    # The holdout intervals were taken in: interval coverage was tested, not skipped.
    arcade = {c["name"]: c for c in reference[1]["checks"]}
    assert arcade["interval_coverage"]["series_tested"] == 1

    async def scenario() -> None:
        async with serving(database_url) as (app, client):
            responses = await post_all(client, bodies)
            assert [r.status_code for r in responses] == [201] * len(bodies)
            groups = passes_of(passes, app)
            # At least two different shapes went through the same pass.
            assert max(len(jobs) for jobs in groups) > 1
            for body, r, expected in zip(bodies, responses, reference, strict=True):
                got = await client.get(f"/v1/assessments/{r.json()['id']}", headers=ADMIN)
                assert got.status_code == 200
                assert without_identity(got.json()) == without_identity(expected)
                assert without_identity(r.json()) == without_identity(expected)
                assert_matches_outside_references(body, got.json())

    run(scenario())


# --- 3. An unknown policy among good submissions ---------------------------------------------


def test_unknown_policy_fails_alone_and_the_others_are_stored(database_url, passes):
    good = [submission(f"bakery{i}", seeds=(7300 + i,)) for i in range(5)]
    bad = submission("orphan", seeds=(7399,), policy="no-such-policy")
    bodies = [*good[:2], bad, *good[2:]]

    async def scenario() -> None:
        async with serving(database_url) as (app, client):
            responses = await post_all(client, bodies)
            refused = responses[2]
            assert refused.status_code == 422, refused.text
            assert refused.headers["content-type"] == PROBLEM_JSON
            problem = refused.json()
            assert [e["loc"] for e in problem["errors"]] == ["policy"]
            assert "no-such-policy" in problem["detail"]
            assert "location" not in refused.headers

            accepted = responses[:2] + responses[3:]
            assert [r.status_code for r in accepted] == [201] * 5
            # The refused submission was in the same pass as good ones.
            shared = pass_holding(passes_of(passes, app), series_ids(bad))
            assert len(shared) > 1
            ids = [r.json()["id"] for r in accepted]
            assert sorted(await listed_ids(client)) == sorted(ids)
            for body, r in zip(good, accepted, strict=True):
                assert [s["id"] for s in r.json()["series"]] == list(series_ids(body))
                got = await client.get(f"/v1/assessments/{r.json()['id']}", headers=ADMIN)
                assert got.status_code == 200 and got.json() == r.json()

    run(scenario())


# --- 4. Idempotency-Key races ----------------------------------------------------------------


def test_same_key_same_body_at_once_stores_one_and_replays_it(database_url, passes):
    body = submission("harbour", seeds=(8801,))
    bystander = submission("quay", seeds=(8802,))

    async def scenario() -> None:
        async with serving(database_url) as (app, client):
            first, second, other = await asyncio.gather(
                post(client, body, key="harbour-run-41"),
                post(client, body, key="harbour-run-41"),
                post(client, bystander),
            )
            assert sorted([first.status_code, second.status_code]) == [200, 201]
            fresh, replayed = (first, second) if first.status_code == 201 else (second, first)
            assert replayed.headers["idempotent-replayed"] == "true"
            assert "idempotent-replayed" not in fresh.headers
            assert replayed.json()["id"] == fresh.json()["id"]
            assert replayed.json() == fresh.json()
            assert replayed.headers["location"] == f"/v1/assessments/{fresh.json()['id']}"
            # Both were in one pass: the key race was met in the database, not before.
            together = pass_holding(passes_of(passes, app), series_ids(body))
            assert together.count(series_ids(body)) == 2
            # A submission without a key in that pass is still stored.
            assert other.status_code == 201, other.text
            assert sorted(await listed_ids(client)) == sorted(
                [fresh.json()["id"], other.json()["id"]]
            )

    run(scenario())


def test_same_key_other_body_at_once_is_409_and_one_is_stored(database_url, passes):
    one = submission("pier", seeds=(8901,))
    other_body = submission("pier", seeds=(8902,), biases=(2.0,))
    bystander = submission("jetty", seeds=(8903,))

    async def scenario() -> None:
        async with serving(database_url) as (app, client):
            a, b, other = await asyncio.gather(
                post(client, one, key="pier-run-7"),
                post(client, other_body, key="pier-run-7"),
                post(client, bystander),
            )
            assert sorted([a.status_code, b.status_code]) == [201, 409]
            (won_body, won), (_lost_body, lost) = sorted(
                [(one, a), (other_body, b)], key=lambda pair: pair[1].status_code
            )
            assert lost.headers["content-type"] == PROBLEM_JSON
            assert lost.json()["status"] == 409
            assert "Idempotency-Key" in lost.json()["detail"]
            assert "location" not in lost.headers
            groups = passes_of(passes, app)
            assert len(pass_holding(groups, series_ids(one))) > 1
            assert other.status_code == 201, other.text
            assert sorted(await listed_ids(client)) == sorted(
                [won.json()["id"], other.json()["id"]]
            )
            stored = await client.get(f"/v1/assessments/{won.json()['id']}", headers=ADMIN)
            # What is stored is the winner's own assessment, not the loser's.
            assert stored.json() == won.json()
            assert [s["n_obs"] for s in stored.json()["series"]] == [
                len(won_body["series"][0]["actuals"])
            ]
            bias = check(stored.json()["series"][0], "bias")
            e = np.asarray(won_body["series"][0]["actuals"]) - np.asarray(
                won_body["series"][0]["fitted"]
            )
            assert bias["details"]["mean_error"] == pytest.approx(float(e.mean()), rel=1e-12)

    run(scenario())


# --- 5. store=false among stored submissions ---------------------------------------------------


def test_store_false_among_stored_is_answered_and_not_kept(database_url, passes):
    bodies = [
        submission(f"market{i}", seeds=(6600 + i,), biases=(1.0 * (i % 2),)) for i in range(8)
    ]
    keep = [i % 2 == 0 for i in range(8)]

    async def scenario() -> None:
        async with serving(database_url) as (app, client):
            responses = await asyncio.gather(
                *(post(client, b, store=s) for b, s in zip(bodies, keep, strict=True))
            )
            groups = passes_of(passes, app)
            assert max(len(jobs) for jobs in groups) > 1
            stored_ids = []
            for body, s, r in zip(bodies, keep, responses, strict=True):
                doc = r.json()
                if s:
                    assert r.status_code == 201, r.text
                    assert doc["id"] is not None and doc["stored"] is True
                    stored_ids.append(doc["id"])
                else:
                    assert r.status_code == 200, r.text
                    assert doc["id"] is None and doc["stored"] is False
                    assert "location" not in r.headers
                assert [x["id"] for x in doc["series"]] == list(series_ids(body))
            assert sorted(await listed_ids(client)) == sorted(stored_ids)

    run(scenario())


# --- 6. The database fails during a pass -------------------------------------------------------


def test_database_failure_answers_every_stored_submission_503_then_recovers(database_url, passes):
    bodies = [submission(f"canteen{i}", seeds=(5500 + i,)) for i in range(5)]
    later = [submission(f"refectory{i}", seeds=(5600 + i,)) for i in range(3)]
    attempts: list[int] = []

    def database_down(_engine: Any, records: Any) -> Any:
        attempts.append(len(records))
        raise sqlalchemy.exc.OperationalError("x", {}, Exception("down"))

    async def scenario() -> None:
        async with serving(database_url) as (app, client):
            with pytest.MonkeyPatch.context() as mp:
                mp.setattr(repo, "save_assessments", database_down)
                responses = await post_all(client, bodies)
            assert sum(attempts) == len(bodies)  # the writes were attempted, and failed
            assert max(len(jobs) for jobs in passes_of(passes, app)) > 1
            for r in responses:
                assert r.status_code == 503, r.text
                assert r.headers["content-type"] == PROBLEM_JSON
                assert r.json()["status"] == 503
                assert "nothing was stored" in r.json()["detail"]
                assert int(r.headers["retry-after"]) > 0
            assert await listed_ids(client) == []

            again = await post_all(client, later)
            assert [r.status_code for r in again] == [201] * len(later)
            assert sorted(await listed_ids(client)) == sorted(r.json()["id"] for r in again)

    run(scenario())


def test_database_failure_spares_the_submissions_that_store_nothing(database_url, passes):
    # A failed write concerns the submissions that were to be stored; a store=false one in the
    # same pass keeps the answer it would have had alone.
    bodies = [submission(f"kiosk{i}", seeds=(5700 + i,)) for i in range(6)]
    keep = [i % 2 == 0 for i in range(6)]

    def database_down(_engine: Any, records: Any) -> Any:
        raise sqlalchemy.exc.OperationalError("x", {}, Exception("down"))

    async def scenario() -> None:
        async with serving(database_url) as (app, client):
            with pytest.MonkeyPatch.context() as mp:
                mp.setattr(repo, "save_assessments", database_down)
                responses = await asyncio.gather(
                    *(post(client, b, store=s) for b, s in zip(bodies, keep, strict=True))
                )
            assert max(len(jobs) for jobs in passes_of(passes, app)) > 1
            for s, r in zip(keep, responses, strict=True):
                if s:
                    assert r.status_code == 503, r.text
                    assert r.headers["content-type"] == PROBLEM_JSON
                else:
                    assert r.status_code == 200, r.text
                    assert r.json()["stored"] is False
            assert await listed_ids(client) == []

    run(scenario())


# --- 7. CSV uploads and policy lookups inside a pass -----------------------------------------


def as_csv(body: dict[str, Any]) -> bytes:
    """The same series in the CSV long format (one row per series and period)."""
    lines = ["series_id,actual,fitted"]
    for s in body["series"]:
        for a, f in zip(s["actuals"], s["fitted"], strict=True):
            lines.append(f"{s['id']},{a!r},{'' if f is None else repr(f)}")
    return ("\n".join(lines) + "\n").encode()


async def post_csv(client: httpx.AsyncClient, body: dict[str, Any]) -> httpx.Response:
    return await client.post(
        "/v1/assessments",
        content=as_csv(body),
        params={"model": body["model"], "version": body["version"]},
        headers={**ADMIN, "Content-Type": "text/csv"},
    )


def test_a_csv_upload_in_a_pass_answers_as_alone(database_url, passes):
    csv_body = submission("bakery-csv", seeds=(4401,), biases=(1.0,))
    json_bodies = [submission(f"bakery{i}", seeds=(4410 + i,)) for i in range(4)]

    async def scenario() -> None:
        async with serving(database_url) as (app, client):
            got_csv, *got_json = await asyncio.gather(
                post_csv(client, csv_body), *(post(client, b) for b in json_bodies)
            )
            assert max(len(jobs) for jobs in passes_of(passes, app)) > 1
            assert pass_holding(passes_of(passes, app), series_ids(csv_body))
            assert [r.status_code for r in got_json] == [201] * 4
        async with serving(database_url) as (_app, client):
            lone = await post_csv(client, csv_body)
        assert got_csv.status_code == lone.status_code == 201, got_csv.text
        assert batch_size_header(got_csv) is not None and batch_size_header(lone) is None
        drop = ("id", "created_at", "labels")  # the CSV upload carries no labels
        assert {k: v for k, v in got_csv.json().items() if k not in drop} == {
            k: v for k, v in lone.json().items() if k not in drop
        }
        assert_matches_outside_references(csv_body, got_csv.json())

    run(scenario())


def test_a_failed_policy_lookup_spares_inline_policies(database_url, passes):
    # The database fails when a policy is looked up by name; a submission with its policy
    # inline needs no lookup and, with store=false, no database at all: it is answered.
    named = [submission(f"depot{i}", seeds=(4500 + i,)) for i in range(3)]
    inline = [
        submission(
            f"yard{i}",
            seeds=(4510 + i,),
            policy={"name": "yard-rules", "checks": {"ljung_box": {"lags": 8}}},
        )
        for i in range(3)
    ]

    def database_down(*_a: Any, **_k: Any) -> Any:
        raise sqlalchemy.exc.OperationalError("x", {}, Exception("down"))

    async def scenario() -> None:
        async with serving(database_url) as (app, client):
            with pytest.MonkeyPatch.context() as mp:
                mp.setattr(repo, "latest_policy_document", database_down)
                responses = await asyncio.gather(
                    *(post(client, b, store=False) for b in [*named, *inline])
                )
            assert max(len(jobs) for jobs in passes_of(passes, app)) > 1
            for r in responses[:3]:
                assert r.status_code == 503, r.text
                assert r.headers["content-type"] == PROBLEM_JSON
            for r in responses[3:]:
                assert r.status_code == 200, r.text
                assert r.json()["policy"]["name"] == "yard-rules"
                assert check(r.json()["series"][0], "ljung_box")["details"]["lags"] == 8

    run(scenario())
