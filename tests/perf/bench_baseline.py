"""What a baseline costs a submission, run by hand: ``python tests/perf/bench_baseline.py``.

In-process (Starlette's TestClient, SQLite in a temporary directory), an invented fleet of
``--series`` weekly series (104 training weeks, a 12-week holdout with intervals and
timestamps, tests/api/baseline_helpers.py). Stores one version, then times ``--repeat`` stored
submissions of a second version without a baseline and with ``baseline: latest-pass``, and
``GET /v1/models/{model}/compare``; prints the medians and the extra time a baseline costs.
``--match-series N`` also times the matching alone (``service.api.baseline.match``) for ``N``
invented stored series of 12 weekly steps, by timestamp and by position.
"""

from __future__ import annotations

import argparse
import statistics
import sys
import tempfile
import time
from pathlib import Path

import orjson

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))


def match_only(n: int, steps: int = 12) -> None:
    from datetime import UTC, datetime

    import numpy as np

    from service.api import baseline
    from service.store.records import AssessmentSummary, SeriesInput

    stamps = [str(np.datetime64("2026-01-05") + np.timedelta64(7 * k, "D")) for k in range(steps)]
    inputs = [
        SeriesInput(
            series_id=f"s{i}",
            weight=None,
            actuals=np.zeros(3),
            fitted=np.zeros(3),
            holdout_actuals=np.zeros(steps),
            holdout_forecasts=np.arange(steps, dtype=float),
            holdout_timestamps=stamps,
        )
        for i in range(n)
    ]
    summary = AssessmentSummary(1, "x", datetime.now(UTC), "m", "v", "pass", n, 0, 0, "default", 1)
    source = baseline.Source("v", summary, inputs)
    ids = [f"s{i}" for i in range(n)]
    for name, given in (("timestamp", stamps), ("position", None)):
        clock = time.perf_counter()
        baseline.match(source, ids, np.full(n, steps), [given] * n, steps)
        print(f"  match {n} series by {name:9s} {time.perf_counter() - clock:7.3f} s")


def main() -> int:
    from fastapi.testclient import TestClient

    from service.api.app import create_app
    from service.settings import Settings
    from tests.api.baseline_helpers import fleet

    parser = argparse.ArgumentParser()
    parser.add_argument("--series", type=int, default=2000)
    parser.add_argument("--repeat", type=int, default=5)
    parser.add_argument("--match-series", type=int, default=0)
    args = parser.parse_args()
    if args.match_series:
        match_only(args.match_series)
    ids = [f"dock-{i:05d}" for i in range(args.series)]
    token = "bench-baseline-admin-token-0000"
    auth = {"Authorization": f"Bearer {token}", "Content-Type": "application/json"}
    first = orjson.dumps(fleet("2026.11", ids=ids))
    plain = orjson.dumps(fleet("2026.12", ids=ids, extra_sd=0.5, version_seed=1))
    against = orjson.dumps(
        fleet("2026.12", ids=ids, extra_sd=0.5, version_seed=1, baseline="latest-pass")
    )
    with tempfile.TemporaryDirectory() as tmp:
        settings = Settings(database_url=f"sqlite:///{tmp}/bench.db", admin_token=token)
        with TestClient(create_app(settings)) as client:
            assert client.post("/v1/assessments", content=first, headers=auth).status_code == 201

            def timed(call) -> float:
                out = []
                for _ in range(args.repeat):
                    clock = time.perf_counter()
                    r = call()
                    out.append(time.perf_counter() - clock)
                    assert r.status_code in (200, 201), r.text
                return statistics.median(out)

            without = timed(lambda: client.post("/v1/assessments", content=plain, headers=auth))
            with_base = timed(lambda: client.post("/v1/assessments", content=against, headers=auth))
            compare = timed(
                lambda: client.get(
                    "/v1/models/crumb-counts/compare",
                    params={"a": "2026.11", "b": "2026.12"},
                    headers=auth,
                )
            )
    print(f"{args.series} series x (104 + 12), median of {args.repeat}, SQLite, in-process")
    print(f"  POST without a baseline     {without:7.3f} s")
    print(f"  POST with latest-pass       {with_base:7.3f} s  (+{with_base - without:.3f} s)")
    print(f"  GET compare                 {compare:7.3f} s")
    return 0


if __name__ == "__main__":
    sys.exit(main())
