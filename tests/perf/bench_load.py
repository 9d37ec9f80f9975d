"""Load on loopback, run by hand (not collected by pytest):

    python tests/perf/bench_load.py [--backend sqlite|postgresql|both] [--duration 60]

For each backend: starts one real server with two workers, mints a token per client, and runs
locust headless for ``--duration`` seconds with 64 clients posting single-series assessments
(156 weeks each, stored) and 16 polling the list and the per-model verdict, as fast as the
server answers. Then counts what was acknowledged against what is stored (no assessment lost or
stored twice), and prints error counts, throughput and p50/p99 latencies from locust's figures.
Bounded: locust stops itself after the duration; the whole run is killed after duration + 180 s.
PostgreSQL: a database of its own on ``PLUMBLINE_TEST_POSTGRES_URL`` (default the local
server), created for the run and dropped after it.
"""

from __future__ import annotations

import argparse
import csv
import json
import os
import signal
import subprocess
import sys
import tempfile
import time
import uuid
from collections.abc import Callable
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))

import httpx  # noqa: E402
from sqlalchemy import create_engine, text  # noqa: E402
from sqlalchemy.engine import make_url  # noqa: E402

from tests.serverproc import Server  # noqa: E402

ADMIN_TOKEN = "plb_bench-admin-" + uuid.uuid4().hex
POSTERS = 64
POLLERS = 16
DEFAULT_POSTGRES_URL = "postgresql+psycopg://postgres@127.0.0.1:5432/test"


def mint_tokens(url: str) -> list[str]:
    admin = {"Authorization": f"Bearer {ADMIN_TOKEN}"}
    out = []
    with httpx.Client(base_url=url, headers=admin, timeout=30) as client:
        for i in range(POSTERS + POLLERS):
            scope = "submit" if i < POSTERS else "read"
            r = client.post("/v1/tokens", json={"scopes": [scope], "label": f"bench-{i}"})
            r.raise_for_status()
            out.append(r.json()["token"])
    return out


def read_stats(prefix: Path) -> dict:
    rows = {}
    with open(f"{prefix}_stats.csv") as f:
        for row in csv.DictReader(f):
            rows[row["Name"]] = {
                "requests": int(row["Request Count"]),
                "failures": int(row["Failure Count"]),
                "rps": round(float(row["Requests/s"]), 1),
                "p50_ms": float(row["50%"]),
                "p99_ms": float(row["99%"]),
                "max_ms": round(float(row["Max Response Time"]), 1),
            }
    return rows


def stored_ids(database_url: str) -> list[str]:
    engine = create_engine(database_url)
    try:
        with engine.connect() as conn:
            return [
                r[0]
                for r in conn.execute(
                    text("SELECT id FROM assessments WHERE model LIKE 'bench-feeder-%'")
                )
            ]
    finally:
        engine.dispose()


def half_written(database_url: str) -> int:
    engine = create_engine(database_url)
    try:
        with engine.connect() as conn:
            return conn.execute(
                text(
                    "SELECT count(*) FROM assessments a WHERE a.n_series <> "
                    "(SELECT count(*) FROM series_results r WHERE r.assessment_seq = a.seq)"
                )
            ).scalar_one()
    finally:
        engine.dispose()


def run_backend(backend: str, database_url: str, duration: int, workdir: Path) -> dict:
    server = Server(
        database_url,
        workdir / f"server-{backend}.log",
        workers=2,
        env={"PLUMBLINE_ADMIN_TOKEN": ADMIN_TOKEN},
    ).start()
    try:
        tokens = mint_tokens(server.url)
        token_file = workdir / f"tokens-{backend}.txt"
        token_file.write_text("\n".join(tokens))
        acked_file = workdir / f"acked-{backend}.txt"
        prefix = workdir / f"locust-{backend}"
        env = {
            **os.environ,
            "PLUMBLINE_BENCH_TOKENS": str(token_file),
            "PLUMBLINE_BENCH_POSTERS": str(POSTERS),
            "PLUMBLINE_BENCH_ACKED": str(acked_file),
        }
        started = time.monotonic()
        subprocess.run(
            [
                sys.executable,
                "-m",
                "locust",
                "-f",
                str(Path(__file__).with_name("locust_load.py")),
                "--headless",
                "-u",
                str(POSTERS + POLLERS),
                "-r",
                str(POSTERS + POLLERS),
                "-t",
                f"{duration}s",
                "--stop-timeout",
                "30",
                "--host",
                server.url,
                "--csv",
                str(prefix),
                "--only-summary",
                "--loglevel",
                "WARNING",
            ],
            env=env,
            timeout=duration + 180,
            check=False,
        )
        wall = time.monotonic() - started
        stats = read_stats(prefix)
        with open(f"{prefix}_failures.csv") as f:
            failures = [
                f"{row['Name']}: {row['Error']} x{row['Occurrences']}" for row in csv.DictReader(f)
            ]
        acked = [line for line in acked_file.read_text().split("\n") if line]
    finally:
        server.kill(signal.SIGTERM)
    stored = stored_ids(database_url)
    log_text = (workdir / f"server-{backend}.log").read_text()
    leaked = [t for t in [ADMIN_TOKEN, *tokens] if t in log_text]
    return {
        "backend": backend,
        "duration_s": duration,
        "wall_s": round(wall, 1),
        "acknowledged": len(acked),
        "acknowledged_distinct": len(set(acked)),
        "stored": len(stored),
        "stored_distinct": len(set(stored)),
        "lost": len(set(acked) - set(stored)),
        "stored_not_acknowledged": len(set(stored) - set(acked)),
        "half_written": half_written(database_url),
        "tokens_in_server_log": len(leaked),
        "stats": stats,
        "failures": failures,
    }


def postgres_database() -> tuple[str, Callable[[], None]]:
    base = os.environ.get("PLUMBLINE_TEST_POSTGRES_URL") or DEFAULT_POSTGRES_URL
    name = "plumbline_bench_" + uuid.uuid4().hex[:12]
    admin = create_engine(base, isolation_level="AUTOCOMMIT")
    with admin.connect() as conn:
        conn.execute(text(f'CREATE DATABASE "{name}"'))

    def drop() -> None:
        with admin.connect() as conn:
            conn.execute(text(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)'))
        admin.dispose()

    return make_url(base).set(database=name).render_as_string(hide_password=False), drop


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--backend", choices=["sqlite", "postgresql", "both"], default="both")
    parser.add_argument("--duration", type=int, default=60)
    parser.add_argument("--keep", type=Path, help="keep server logs and locust files here")
    args = parser.parse_args()
    results = []
    with tempfile.TemporaryDirectory(prefix="plumbline-bench-") as tmp:
        workdir = args.keep or Path(tmp)
        workdir.mkdir(parents=True, exist_ok=True)
        if args.backend in ("sqlite", "both"):
            results.append(
                run_backend("sqlite", f"sqlite:///{workdir / 'bench.db'}", args.duration, workdir)
            )
        if args.backend in ("postgresql", "both"):
            url, drop = postgres_database()
            try:
                results.append(run_backend("postgresql", url, args.duration, workdir))
            finally:
                drop()
    print(json.dumps(results, indent=2))
    ok = all(
        r["lost"] == 0
        and r["half_written"] == 0
        and r["tokens_in_server_log"] == 0
        and r["acknowledged"] == r["acknowledged_distinct"]
        and r["stored"] == r["stored_distinct"]
        and all(s["failures"] == 0 for s in r["stats"].values())
        for r in results
    )
    print("zero errors, nothing lost or stored twice" if ok else "FAILED: see the figures above")
    return 0 if ok else 1


if __name__ == "__main__":
    sys.exit(main())
