"""Locust users for bench_load.py (not a test module): posters and pollers.

Environment: ``PLUMBLINE_BENCH_TOKENS`` (a file of bearer tokens, one a line: the first
``PLUMBLINE_BENCH_POSTERS`` for posters, the rest for pollers) and ``PLUMBLINE_BENCH_ACKED``
(where the ids of acknowledged assessments are written when the run stops).
"""

from __future__ import annotations

import itertools
import json
import math
import os
import random
import threading
import uuid

from locust import FastHttpUser, events, task

TOKENS = open(os.environ["PLUMBLINE_BENCH_TOKENS"]).read().split()
POSTERS = int(os.environ["PLUMBLINE_BENCH_POSTERS"])
ACKED_FILE = os.environ["PLUMBLINE_BENCH_ACKED"]
MODELS = [f"bench-feeder-{k}" for k in range(8)]  # invented fleet of feeder-line models

_poster_tokens = itertools.cycle(TOKENS[:POSTERS])
_poller_tokens = itertools.cycle(TOKENS[POSTERS:])
_acked: list[str] = []
_lock = threading.Lock()


def one_series_body(rng: random.Random, model: str) -> bytes:
    """One invented series of 156 weeks: seasonal level, fitted values off by noise."""
    n = 156
    fitted = [100.0 + 12.0 * math.sin(2 * math.pi * t / 52) for t in range(n)]
    actuals = [f + rng.gauss(0.0, 2.0) for f in fitted]
    return json.dumps(
        {
            "model": model,
            "version": "1",
            "season_length": 52,
            "series": [
                {
                    "id": "line-1",
                    "actuals": [round(v, 3) for v in actuals],
                    "fitted": [round(v, 3) for v in fitted],
                }
            ],
        }
    ).encode()


class Poster(FastHttpUser):
    fixed_count = POSTERS

    def on_start(self) -> None:
        self.auth = {
            "Authorization": f"Bearer {next(_poster_tokens)}",
            "Content-Type": "application/json",
        }
        self.rng = random.Random()

    @task
    def post_assessment(self) -> None:
        body = one_series_body(self.rng, self.rng.choice(MODELS))
        headers = {**self.auth, "Idempotency-Key": uuid.uuid4().hex}
        with self.client.post(
            "/v1/assessments",
            data=body,
            headers=headers,
            name="POST /v1/assessments",
            catch_response=True,
        ) as r:
            if r.status_code != 201:
                r.failure(f"status {r.status_code}: {r.text[:200]}")
                return
            with _lock:
                _acked.append(r.json()["id"])


class Poller(FastHttpUser):
    fixed_count = len(TOKENS) - POSTERS

    def on_start(self) -> None:
        self.auth = {"Authorization": f"Bearer {next(_poller_tokens)}"}
        self.rng = random.Random()

    @task
    def list_assessments(self) -> None:
        with self.client.get(
            "/v1/assessments?limit=50",
            headers=self.auth,
            name="GET /v1/assessments",
            catch_response=True,
        ) as r:
            if r.status_code != 200:
                r.failure(f"status {r.status_code}")

    @task
    def model_verdict(self) -> None:
        model = self.rng.choice(MODELS)
        with self.client.get(
            f"/v1/models/{model}/verdict",
            headers=self.auth,
            name="GET /v1/models/{model}/verdict",
            catch_response=True,
        ) as r:
            if r.status_code in (200, 404):  # 404: nothing stored for this model yet
                r.success()
            else:
                r.failure(f"status {r.status_code}")


@events.test_stop.add_listener
def write_acked(**_kwargs) -> None:
    with _lock, open(ACKED_FILE, "w") as out:
        out.write("\n".join(_acked))
