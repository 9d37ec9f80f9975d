"""Worker scaling on PostgreSQL, run by hand (not collected by pytest):

    python tests/perf/bench_workers.py [--seconds 10] [--connections 16] [--rounds 2]

Stored single-series assessments (156 observations, the body of ``bench_service.py``) posted
as fast as the server answers by a bounded asyncio loop on loopback, against the real server
with one worker process and then with two, on a PostgreSQL database of its own
(``PLUMBLINE_TEST_POSTGRES_URL``, default the local server; created for the run and dropped
after it). The rounds alternate 1, 2, 1, 2, ... so a change in the machine's load falls on both.

Per run: requests per wall-clock second, the CPU seconds the server's processes used (all of
its process group, from ``/proc``; PostgreSQL's own are not counted), and a check that every
acknowledged assessment is stored once. The per-token rate limit is off for the run (one token
sends everything). The per-token rate limit is off for the run (one token
sends everything). The load loop runs on the same machine and takes CPU
of its own: on two cores the figures say how far a second worker helps there, not what two
workers do on a machine of their own.
"""

from __future__ import annotations

import argparse
import asyncio
import json
import os
import signal
import sys
import tempfile
import time
import uuid
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))

import httpx  # noqa: E402
import orjson  # noqa: E402
from sqlalchemy import create_engine, text  # noqa: E402

from tests.perf.bench_load import postgres_database  # noqa: E402
from tests.perf.bench_service import body  # noqa: E402
from tests.serverproc import Server  # noqa: E402

TOKEN = "plb_bench-workers-" + uuid.uuid4().hex
WARM_UP_SECONDS = 2.0


def group_cpu_seconds(pgid: int) -> float:
    """User + system CPU seconds of every live process in process group ``pgid``."""
    total = 0.0
    tick = os.sysconf("SC_CLK_TCK")
    for entry in Path("/proc").iterdir():
        if not entry.name.isdigit():
            continue
        try:
            fields = (entry / "stat").read_text().rsplit(")", 1)[1].split()
        except OSError:
            continue
        if int(fields[2]) == pgid:
            total += (int(fields[11]) + int(fields[12])) / tick
    return total


def load(url: str, payload: bytes, seconds: float, connections: int) -> tuple[int, float]:
    """Post ``payload`` over ``connections`` for ``seconds``: (acknowledged, elapsed)."""
    headers = {"Content-Type": "application/json", "Authorization": f"Bearer {TOKEN}"}

    async def run() -> int:
        done = 0
        deadline = time.monotonic() + seconds
        limits = httpx.Limits(max_connections=connections)
        async with httpx.AsyncClient(timeout=60, limits=limits) as client:

            async def worker() -> None:
                nonlocal done
                while time.monotonic() < deadline:
                    r = await client.post(url, content=payload, headers=headers)
                    if r.status_code != 201:
                        raise SystemExit(f"{url}: {r.status_code} {r.text[:200]}")
                    done += 1

            await asyncio.gather(*(worker() for _ in range(connections)))
        return done

    start = time.monotonic()
    count = asyncio.run(run())
    return count, time.monotonic() - start


def stored(database_url: str, model: str) -> tuple[int, int]:
    engine = create_engine(database_url)
    try:
        with engine.connect() as conn:
            row = conn.execute(
                text("SELECT count(*), count(DISTINCT id) FROM assessments WHERE model = :m"),
                {"m": model},
            ).one()
            return int(row[0]), int(row[1])
    finally:
        engine.dispose()


def one_run(
    database_url: str, workers: int, seconds: float, connections: int, tag: str, logs: Path
) -> dict:
    model = f"bench-workers-{tag}"
    doc = orjson.loads(body(1))
    payload = orjson.dumps({**doc, "model": model})
    warm = orjson.dumps({**doc, "model": f"{model}-warm-up"})
    server = Server(
        database_url,
        logs / f"server-{tag}.log",
        workers=workers,
        env={"PLUMBLINE_ADMIN_TOKEN": TOKEN, "PLUMBLINE_RATE_LIMIT_PER_SECOND": "0"},
    ).start()
    try:
        url = f"{server.url}/v1/assessments"
        load(url, warm, WARM_UP_SECONDS, connections)
        cpu0 = group_cpu_seconds(server.proc.pid)
        acked, elapsed = load(url, payload, seconds, connections)
        cpu = group_cpu_seconds(server.proc.pid) - cpu0
    finally:
        server.kill(signal.SIGTERM)
    rows, distinct = stored(database_url, model)
    return {
        "workers": workers,
        "requests": acked,
        "per_second": round(acked / elapsed, 1),
        "server_cpu_s": round(cpu, 1),
        "per_server_cpu_second": round(acked / cpu, 1) if cpu > 0 else None,
        "stored": rows,
        "stored_once": rows == distinct == acked,
    }


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--seconds", type=float, default=10.0)
    parser.add_argument("--connections", type=int, default=16)
    parser.add_argument("--rounds", type=int, default=2)
    args = parser.parse_args()
    url, drop = postgres_database()
    from service.store.migrate import upgrade

    runs = []
    try:
        upgrade(url)
        with tempfile.TemporaryDirectory(prefix="plumbline-workers-") as tmp:
            for r in range(args.rounds):
                for workers in (1, 2):
                    runs.append(
                        one_run(
                            url,
                            workers,
                            args.seconds,
                            args.connections,
                            f"{r}-{workers}",
                            Path(tmp),
                        )
                    )
                    print(json.dumps(runs[-1]), flush=True)
    finally:
        drop()
    one = [r["per_second"] for r in runs if r["workers"] == 1]
    two = [r["per_second"] for r in runs if r["workers"] == 2]
    summary = {
        "cores": os.cpu_count(),
        "seconds": args.seconds,
        "connections": args.connections,
        "one_worker_per_second": one,
        "two_workers_per_second": two,
        "ratio_of_means": round(sum(two) / len(two) / (sum(one) / len(one)), 2),
        "all_stored_once": all(r["stored_once"] for r in runs),
    }
    print(json.dumps(summary, indent=2))
    return 0 if summary["all_stored_once"] else 1


if __name__ == "__main__":
    sys.exit(main())
