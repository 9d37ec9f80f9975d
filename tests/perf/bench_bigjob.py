"""Benchmark: a big Parquet fleet submitted as a background job to the real server.

Run by hand (never collected by pytest)::

    python tests/perf/bench_bigjob.py --series 1000000 --periods 52 [--file fleet.parquet]
        [--keep]

Writes the invented fleet of tests/perf/bench_chunked.py (seeded weekly series, the long
layout, no timestamps) to a Parquet file, starts the server (``service.api.server.run``, one
worker process, one job thread, SQLite in a temporary directory) as a subprocess, posts the
file with ``Prefer: respond-async``, polls the job until it is done and reads the assessment's
verdict back with ``?series=none``. The server's peak resident memory is its ``VmHWM``
(``/proc/<pid>/status``), read after the job is done; the times are wall-clock from this
process: the upload (until the 202), the job (from the 202 to ``done``) and in all.

Target: the whole job under 1.5 GB of the server's peak resident memory for 1,000,000 x 52.
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import sys
import tempfile
import time
from pathlib import Path

import httpx

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from tests.perf.bench_chunked import write_fleet
from tests.serverproc import Server

TOKEN = "bench-bigjob-admin-token"
HEADERS = {"Authorization": f"Bearer {TOKEN}"}
GIB = 1024**3


def vm_hwm_kib(pid: int) -> int:
    """Peak resident memory of a process (``VmHWM``), in KiB."""
    for line in Path(f"/proc/{pid}/status").read_text().splitlines():
        if line.startswith("VmHWM:"):
            return int(line.split()[1])
    raise RuntimeError("no VmHWM in /proc status")


def vm_rss_kib(pid: int) -> int:
    for line in Path(f"/proc/{pid}/status").read_text().splitlines():
        if line.startswith("VmRSS:"):
            return int(line.split()[1])
    raise RuntimeError("no VmRSS in /proc status")


def chunks_of(path: Path, size: int = 1 << 20):
    with path.open("rb") as f:
        while piece := f.read(size):
            yield piece


def run(path: Path, workdir: Path) -> dict[str, object]:
    db = workdir / "bench.db"
    log = workdir / "server.log"
    server = Server(
        f"sqlite:///{db}",
        log,
        env={
            "PLUMBLINE_ADMIN_TOKEN": TOKEN,
            "PLUMBLINE_MAX_BODY_BYTES": str(2 * GIB),
            "PLUMBLINE_BODY_READ_TIMEOUT_SECONDS": "600",
            "PLUMBLINE_MAX_SERIES": "2000000",
            "PLUMBLINE_JOB_WORKERS": "1",
            "PLUMBLINE_RATE_LIMIT_PER_SECOND": "0",
            "TMPDIR": str(workdir),
        },
    )
    with server:
        assert server.proc is not None
        pid = server.proc.pid
        idle = vm_hwm_kib(pid)
        size = path.stat().st_size
        query = "model=bench-weekly&version=1&season_length=52&series=none"
        t0 = time.perf_counter()
        r = httpx.post(
            f"{server.url}/v1/assessments?{query}",
            content=chunks_of(path),
            headers={
                **HEADERS,
                "Content-Type": "application/vnd.apache.parquet",
                "Content-Length": str(size),
                "Prefer": "respond-async",
            },
            timeout=1200,
        )
        t_submit = time.perf_counter() - t0
        if r.status_code != 202:
            raise SystemExit(f"submission answered {r.status_code}: {r.text[:2000]}")
        after_submit = vm_hwm_kib(pid)
        job_url = server.url + r.headers["location"]
        peak_rss = 0
        last = None
        while True:
            time.sleep(1.0)
            peak_rss = max(peak_rss, vm_rss_kib(pid))
            job = httpx.get(job_url, headers=HEADERS, timeout=60).json()
            progress = job["progress"]["series_done"]
            if progress != last:
                print(
                    f"  {time.perf_counter() - t0:7.1f} s  {job['state']:8s} "
                    f"{progress:>9,} series  RSS {vm_rss_kib(pid) / 1024:,.0f} MiB",
                    flush=True,
                )
                last = progress
            if job["state"] in ("done", "failed"):
                break
        total = time.perf_counter() - t0
        if job["state"] != "done":
            raise SystemExit(f"the job failed: {json.dumps(job['error'])}")
        hwm = vm_hwm_kib(pid)
        head = httpx.get(
            server.url + job["assessment"]["href"] + "?series=none", headers=HEADERS, timeout=600
        ).json()
    return {
        "series": head["fleet"]["n_series"],
        "file_mib": round(size / 2**20, 1),
        "verdict": head["verdict"],
        "submit_s": round(t_submit, 1),
        "job_s": round(total - t_submit, 1),
        "total_s": round(total, 1),
        "peak_rss_mib": round(hwm / 1024),
        "peak_rss_after_submit_mib": round(after_submit / 1024),
        "idle_rss_mib": round(idle / 1024),
        "polled_max_rss_mib": round(peak_rss / 1024),
        "db_mib": round(db.stat().st_size / 2**20),
        "machine": f"{platform.machine()}, {os.cpu_count()} cores, "
        f"Python {platform.python_version()}",
    }


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--series", type=int, default=1_000_000)
    ap.add_argument("--periods", type=int, default=52)
    ap.add_argument("--file", type=Path, help="the Parquet file (written if absent)")
    ap.add_argument("--keep", action="store_true", help="keep the working directory")
    args = ap.parse_args()
    workdir = Path(tempfile.mkdtemp(prefix="plumbline-bigjob-"))
    path = args.file or workdir / f"fleet-{args.series}x{args.periods}.parquet"
    if not path.exists():
        t = time.perf_counter()
        write_fleet(path, args.series, args.periods)
        print(f"wrote {path.stat().st_size / 2**20:,.0f} MiB in {time.perf_counter() - t:.1f} s")
    try:
        print(json.dumps(run(path, workdir), indent=2))
    finally:
        if not args.keep:
            for p in sorted(workdir.rglob("*"), reverse=True):
                if p != path or args.file is None:
                    p.unlink() if p.is_file() else p.rmdir()
            if args.file is None or args.file.parent != workdir:
                try:
                    workdir.rmdir()
                except OSError:
                    pass


if __name__ == "__main__":
    main()
