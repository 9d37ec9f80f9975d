"""What a baseline costs a submission, run by hand: ``python tests/perf/bench_baseline.py``.

In-process (Starlette's TestClient, SQLite in a temporary directory), an invented fleet of
``--series`` weekly series (104 training weeks, a 12-week holdout with intervals and
timestamps, tests/api/baseline_helpers.py). Stores one version, then times ``--repeat`` stored
submissions of a second version without a baseline and with ``baseline: latest-pass``, and
``GET /v1/models/{model}/compare``; prints the medians and the extra time a baseline costs.
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


def main() -> int:
    from fastapi.testclient import TestClient

    from service.api.app import create_app
    from service.settings import Settings
    from tests.api.baseline_helpers import fleet

    parser = argparse.ArgumentParser()
    parser.add_argument("--series", type=int, default=2000)
    parser.add_argument("--repeat", type=int, default=5)
    args = parser.parse_args()
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
