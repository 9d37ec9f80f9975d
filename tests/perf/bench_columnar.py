"""Columnar benchmark, run by hand (not collected by pytest):

    python tests/perf/bench_columnar.py [--repeats 5]

Extends ``bench_service.py`` (same invented fleet, same seed, same per-series reference loop)
to the columnar upload: one assessment of 4,000 series x 156 observations sent as an Arrow IPC
stream in the long layout (``series_id``, ``timestamp``, ``actual``, ``fitted``) with
``store=false&series=none``, end to end over HTTP against the real server (one worker, SQLite
in a temporary folder, loopback), against the per-series loop over statsmodels/scipy computing
the four core tests (t test of a zero mean, Ljung-Box, ARCH LM, Jarque-Bera) on the same data,
the reading of the same Arrow bytes into per-series arrays included. Target: at least 40x.

Beside it, for scale: the same request with every series row (``series=all``), as Parquet,
stored (``store=true&series=none``), and the JSON body of ``bench_service.py``. The server's
CPU seconds are read from ``/proc`` so the ratios stay meaningful on a shared machine, and
``Server-Timing`` gives its stages. Every request goes to 127.0.0.1 only.
"""

from __future__ import annotations

import argparse
import io
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))
sys.path.insert(0, str(Path(__file__).resolve().parent))

import numpy as np
import orjson
import pyarrow as pa
import pyarrow.parquet as pq
from bench_service import (
    FLEET,
    N_OBS,
    SEED,
    TOKEN,
    body,
    cpu_seconds,
    median_run,
    reference_tests,
)

from tests.serverproc import (
    ServerDidNotStart,
    free_port,
    run_args,
    start_python,
    stop,
    wait_until_answers,
)

ARROW = "application/vnd.apache.arrow.stream"
PARQUET = "application/vnd.apache.parquet"
QUERY = "model=bench&version=1&model_params=1"


def long_table(json_body: bytes) -> pa.Table:
    """The fleet of ``bench_service.body`` in the long layout (weekly timestamps)."""
    doc = orjson.loads(json_body)
    series = doc["series"]
    n = len(series)
    actual = np.array([s["actuals"] for s in series], dtype=float).ravel()
    fitted = np.array(
        [[np.nan if v is None else v for v in s["fitted"]] for s in series], dtype=float
    ).ravel()
    weeks = np.datetime64("2023-01-02") + 7 * np.arange(N_OBS).astype("timedelta64[D]")
    return pa.table(
        {
            "series_id": pa.array(np.repeat([s["id"] for s in series], N_OBS)),
            "timestamp": pa.array(np.tile(weeks.astype("datetime64[s]"), n)),
            "actual": pa.array(actual),
            "fitted": pa.array(fitted, from_pandas=True),  # NaN -> null: a missing value
        }
    )


def arrow_bytes(table: pa.Table) -> bytes:
    sink = pa.BufferOutputStream()
    with pa.ipc.new_stream(sink, table.schema) as writer:
        writer.write_table(table)
    return sink.getvalue().to_pybytes()


def parquet_bytes(table: pa.Table) -> bytes:
    out = io.BytesIO()
    pq.write_table(table, out)
    return out.getvalue()


def per_series_loop(arrow: bytes) -> float:
    """The four reference tests one series at a time, from the Arrow bytes (reading and
    grouping them into per-series arrays included)."""
    t0 = time.perf_counter()
    table = pa.ipc.open_stream(pa.BufferReader(arrow)).read_all()
    ids = table.column("series_id").to_numpy(zero_copy_only=False)
    actual = table.column("actual").to_numpy()
    fitted = table.column("fitted").to_numpy(zero_copy_only=False)
    starts = np.flatnonzero(np.r_[True, ids[1:] != ids[:-1]])
    ends = np.r_[starts[1:], ids.size]
    doc = {
        "model_params": 1,
        "series": [
            {"actuals": actual[a:b], "fitted": [None if np.isnan(v) else v for v in fitted[a:b]]}
            for a, b in zip(starts, ends, strict=True)
        ],
    }
    reference_tests(doc)
    return time.perf_counter() - t0


def timed(url: str, payload: bytes, kind: str, repeats: int, expect: int) -> list:
    import httpx

    out = []
    headers = {"Content-Type": kind, "Authorization": f"Bearer {TOKEN}"}
    with httpx.Client(timeout=300) as client:
        for _ in range(repeats):
            t0 = time.perf_counter()
            r = client.post(url, content=payload, headers=headers)
            out.append((time.perf_counter() - t0, r))
            if r.status_code != expect:
                raise SystemExit(f"{url}: {r.status_code} {r.text[:300]}")
    return out


def main() -> int:
    parser = argparse.ArgumentParser()
    parser.add_argument("--repeats", type=int, default=5)
    args = parser.parse_args()
    json_body = body(FLEET, SEED)
    table = long_table(json_body)
    arrow, parquet = arrow_bytes(table), parquet_bytes(table)
    rows: list[tuple[str, float, float, str, int]] = []
    with tempfile.TemporaryDirectory() as tmp_name:
        tmp = Path(tmp_name)
        port = free_port()
        svc = start_python(
            run_args(port),
            {
                "PLUMBLINE_DATABASE_URL": f"sqlite:///{tmp / 'bench.db'}",
                "PLUMBLINE_ADMIN_TOKEN": TOKEN,
                "PLUMBLINE_RATE_LIMIT_PER_SECOND": "0",
            },
            tmp / "service.log",
        )
        base = f"http://127.0.0.1:{port}/v1/assessments?{QUERY}"
        cases = [
            (
                "Arrow, store=false, series=none",
                f"{base}&store=false&series=none",
                arrow,
                ARROW,
                200,
            ),
            ("Arrow, store=false, series=all", f"{base}&store=false", arrow, ARROW, 200),
            (
                "Parquet, store=false, series=none",
                f"{base}&store=false&series=none",
                parquet,
                PARQUET,
                200,
            ),
            ("Arrow, stored, series=none", f"{base}&series=none", arrow, ARROW, 201),
            (
                "JSON body, store=false, series=none",
                f"{base}&store=false&series=none",
                json_body,
                "application/json",
                200,
            ),
        ]
        try:
            wait_until_answers(f"http://127.0.0.1:{port}/healthz", svc, tmp / "service.log")
            for _, url, payload, kind, expect in cases:  # warm up: imports, first connections
                timed(url, payload, kind, 1, expect)
            for name, url, payload, kind, expect in cases:
                cpu0 = cpu_seconds(svc.pid)
                runs = timed(url, payload, kind, args.repeats, expect)
                cpu = (cpu_seconds(svc.pid) - cpu0) / args.repeats
                seconds, response = median_run(runs)
                rows.append(
                    (
                        name,
                        seconds,
                        cpu,
                        response.headers.get("server-timing", ""),
                        len(response.content),
                    )
                )
        except ServerDidNotStart as exc:
            raise SystemExit(str(exc)) from None
        finally:
            stop(svc)
    cpu0 = time.process_time()
    loop_s = per_series_loop(arrow)
    loop_cpu = time.process_time() - cpu0
    mb = len(arrow) / 1e6
    print(
        f"{FLEET} series x {N_OBS}: Arrow {mb:.1f} MB, Parquet {len(parquet) / 1e6:.1f} MB, "
        f"JSON {len(json_body) / 1e6:.1f} MB; median of {args.repeats}\n"
    )
    print("| request | end to end | server CPU | answer | speed-up (wall / CPU) | stages (ms) |")
    print("|---|---|---|---|---|---|")
    for name, seconds, cpu, stages, size in rows:
        print(
            f"| {name} | {seconds:.3f} s | {cpu:.3f} s | {size / 1e3:.0f} KB | "
            f"{loop_s / seconds:.1f}x / {loop_cpu / cpu:.1f}x | {stages} |"
        )
    print(
        f"| per-series statsmodels/scipy loop, 4 tests | {loop_s:.2f} s | {loop_cpu:.2f} s "
        "| | 1x | |"
    )
    print(
        f"\ntarget: Arrow, store=false, series=none at least 40x: "
        f"{loop_s / rows[0][1]:.1f}x wall-clock, {loop_cpu / rows[0][2]:.1f}x by CPU seconds"
    )
    return 0


if __name__ == "__main__":
    sys.exit(main())
