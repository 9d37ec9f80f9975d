"""Service benchmark, run by hand (not collected by pytest):

    python tests/perf/bench_service.py [--seconds 10] [--connections 8]

Starts the real server (one worker, SQLite in a temporary folder) on loopback and measures:

1. Throughput of stored single-series assessments (156 observations) driven by ``wrk`` (Debian
   package ``wrk``; a bounded Python load loop stands in when it is missing), against a bare
   FastAPI endpoint under the same uvicorn settings that only parses the same JSON body (with
   the framework's ``request.json()``, and with ``orjson`` as the service does). Target: at
   least 30% of the bare endpoint's throughput.
2. One ``store=false`` assessment of 4,000 series x 156 observations, end to end over HTTP
   (JSON parsing included), against a per-series loop over statsmodels/scipy computing the four
   core tests (Ljung-Box, ARCH LM, Jarque-Bera, t test of a zero mean) on the same body, JSON
   parsing included. Target: at least 20x faster.

Besides wall-clock rates, each server's CPU seconds are read from ``/proc`` so that the ratios
stay meaningful on a machine shared with other work. ``Server-Timing`` headers give the service's
time per stage (parse, policy, assess, encode, store).

Every request loop is bounded in time and count and only talks to 127.0.0.1.
"""

from __future__ import annotations

import argparse
import asyncio
import os
import re
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path
from typing import Any

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

import numpy as np
import orjson
from fastapi import FastAPI, Request
from fastapi.responses import Response

from tests.serverproc import (
    ServerDidNotStart,
    free_port,
    run_args,
    start_python,
    stop,
    wait_until_answers,
)

TOKEN = "bench-admin-token"
N_OBS = 156
FLEET = 4000
SEED = 156


def series(rng: np.random.Generator, sid: str) -> dict:
    level = 100.0 + 10.0 * np.sin(np.arange(N_OBS) * 2 * np.pi / 52)
    e = rng.normal(0.0, 3.0, N_OBS)
    e[1:] += 0.2 * e[:-1]
    return {
        "id": sid,
        "actuals": np.round(level + e, 3).tolist(),
        "fitted": [None, *np.round(level[1:], 3).tolist()],
    }


def body(n: int, seed: int = SEED) -> bytes:
    rng = np.random.default_rng(seed)
    return orjson.dumps(
        {
            "model": "bench",
            "version": "1",
            "model_params": 1,
            "series": [series(rng, f"s{i}") for i in range(n)],
        }
    )


# ------------------------------------------------------------------------------ bare endpoint


def bare_app() -> FastAPI:
    app = FastAPI()

    @app.post("/bare")
    async def bare(request: Request) -> Response:
        # The framework's own JSON parsing (Starlette's request.json()).
        doc = await request.json()
        return Response(
            orjson.dumps({"n_series": len(doc["series"])}), media_type="application/json"
        )

    @app.post("/statsmodels")
    async def per_request_statsmodels(request: Request) -> Response:
        # The scale point: parse, then the four reference tests per series, nothing stored.
        doc = orjson.loads(await request.body())
        return Response(orjson.dumps({"p": reference_tests(doc)}), media_type="application/json")

    @app.post("/bare-orjson")
    async def bare_orjson(request: Request) -> Response:
        # The parser the service itself uses: the strictest baseline.
        doc = orjson.loads(await request.body())
        return Response(
            orjson.dumps({"n_series": len(doc["series"])}), media_type="application/json"
        )

    return app


def serve_memoised(port: int) -> None:
    """The real service with the statistics memoised (a diagnostic, never a product mode): the
    first pass's result is reused for every later submission, so what remains is the
    service's own path (HTTP, middleware, token, parsing, policy, encoding, storing)."""
    from service.api import assessing
    from service.api.server import run

    real = assessing.assess_many_results
    memo: list = []

    def memoised(items):
        if not memo:
            memo.append(real(items[:1])[0])
        return [memo[0] for _ in items]  # a typed result is immutable: shared as it is

    assessing.assess_many_results = memoised
    run(host="127.0.0.1", port=port, workers=1)


def serve_bare(port: int) -> None:
    import uvicorn

    uvicorn.run(
        bare_app(), host="127.0.0.1", port=port, workers=1, log_level="warning", access_log=False
    )


# ------------------------------------------------------------------------------ load


def cpu_seconds(pid: int) -> float:
    """User + system CPU time of a process (Linux ``/proc``), robust to other load."""
    fields = Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()
    return (int(fields[11]) + int(fields[12])) / os.sysconf("SC_CLK_TCK")


def measured_rate(
    url: str, payload: bytes, seconds: int, connections: int, tmp: Path, pid: int
) -> tuple[float, float]:
    """(requests per wall-clock second, requests per server CPU second)."""
    cpu0 = cpu_seconds(pid)
    t0 = time.monotonic()
    per_s = rate(url, payload, seconds, connections, tmp)
    elapsed = time.monotonic() - t0
    cpu = cpu_seconds(pid) - cpu0
    return per_s, per_s * elapsed / cpu if cpu > 0 else float("nan")


def wrk_rate(url: str, body_file: Path, seconds: int, connections: int, tmp: Path) -> float:
    script = tmp / "post.lua"
    script.write_text(
        'wrk.method = "POST"\n'
        'wrk.headers["Content-Type"] = "application/json"\n'
        f'wrk.headers["Authorization"] = "Bearer {TOKEN}"\n'
        f'local f = io.open("{body_file}", "rb")\nwrk.body = f:read("*a")\nf:close()\n'
        "done = function(summary, latency, requests)\n"
        '  io.write(string.format("ERRORS %d %d\\n", summary.errors.status, '
        "summary.errors.connect + summary.errors.read + summary.errors.write + "
        "summary.errors.timeout))\nend\n"
    )
    out = subprocess.run(
        ["wrk", "-t1", f"-c{connections}", f"-d{seconds}s", "-s", str(script), url],
        capture_output=True,
        text=True,
        timeout=seconds + 60,
        check=True,
    ).stdout
    rate = float(re.search(r"Requests/sec:\s+([\d.]+)", out).group(1))
    errors = re.search(r"ERRORS (\d+) (\d+)", out)
    if errors and (int(errors.group(1)) or int(errors.group(2))):
        raise SystemExit(f"wrk saw errors against {url}:\n{out}")
    return rate


def python_rate(url: str, payload: bytes, seconds: int, connections: int) -> float:
    """Bounded asyncio load loop (used when wrk is not installed)."""
    import httpx

    async def run() -> int:
        done = 0
        deadline = time.monotonic() + seconds
        headers = {"Content-Type": "application/json", "Authorization": f"Bearer {TOKEN}"}
        async with httpx.AsyncClient(timeout=30) as client:

            async def worker() -> None:
                nonlocal done
                while time.monotonic() < deadline and done < 10_000_000:
                    r = await client.post(url, content=payload, headers=headers)
                    if r.status_code >= 300:
                        raise SystemExit(f"{url}: {r.status_code} {r.text[:200]}")
                    done += 1

            await asyncio.gather(*(worker() for _ in range(connections)))
        return done

    start_t = time.monotonic()
    count = asyncio.run(run())
    return count / (time.monotonic() - start_t)


def rate(url: str, payload: bytes, seconds: int, connections: int, tmp: Path) -> float:
    if shutil.which("wrk"):
        path = tmp / "body.json"
        path.write_bytes(payload)
        return wrk_rate(url, path, seconds, connections, tmp)
    return python_rate(url, payload, seconds, connections)


# ------------------------------------------------------------------------------ baseline


def reference_tests(doc: dict) -> list[list[float]]:
    """statsmodels/scipy one series at a time: Ljung-Box, ARCH LM, Jarque-Bera, t test
    (their p-values per series)."""
    from scipy import stats
    from statsmodels.stats.diagnostic import acorr_ljungbox, het_arch

    k = doc.get("model_params", 0)
    out = []
    for s in doc["series"]:
        a = np.array(s["actuals"], dtype=float)
        f = np.array([np.nan if v is None else v for v in s["fitted"]], dtype=float)
        e = a - f
        e = e[~np.isnan(e)]
        lags = min(10, e.size // 5)
        lb = acorr_ljungbox(e, lags=[lags], model_df=k)
        arch = het_arch(e, nlags=min(10, e.size // 5))
        out.append(
            [
                float(lb["lb_pvalue"].iloc[0]),
                float(arch[1]),
                float(stats.jarque_bera(e).pvalue),
                float(stats.ttest_1samp(e, 0.0).pvalue),
            ]
        )
    return out


def per_series_loop(payload: bytes) -> float:
    """:func:`reference_tests` over the whole body, JSON parsing included."""
    t0 = time.perf_counter()
    reference_tests(orjson.loads(payload))
    return time.perf_counter() - t0


def mean_stages(responses: list[Any]) -> str:
    """Mean of each ``Server-Timing`` stage over responses, in ms."""
    totals: dict[str, float] = {}
    for r in responses:
        for part in r.headers.get("server-timing", "").split(","):
            name, _, dur = part.strip().partition(";dur=")
            if dur:
                totals[name] = totals.get(name, 0.0) + float(dur)
    return ", ".join(f"{k} {v / len(responses):.2f}" for k, v in totals.items())


def timed_posts(
    url: str, payload: bytes, repeats: int, expect: int = 200
) -> list[tuple[float, Any]]:
    """``repeats`` POSTs of ``payload``: (seconds end to end, response) each."""
    import httpx

    out = []
    with httpx.Client(timeout=300) as client:
        for _ in range(repeats):
            t0 = time.perf_counter()
            r = client.post(
                url,
                content=payload,
                headers={"Content-Type": "application/json", "Authorization": f"Bearer {TOKEN}"},
            )
            out.append((time.perf_counter() - t0, r))
            if r.status_code != expect:
                raise SystemExit(f"{url}: {r.status_code} {r.text[:300]}")
    return out


def mean_per_pass(metrics_url: str) -> float:
    """Mean of the ``plumbline_submissions_per_pass`` histogram so far."""
    import httpx

    text = httpx.get(metrics_url, headers={"Authorization": f"Bearer {TOKEN}"}).text
    found = dict(
        re.findall(r"^plumbline_submissions_per_pass_(sum|count) ([\d.e+]+)$", text, re.MULTILINE)
    )
    count = float(found.get("count", 0))
    return float(found.get("sum", 0)) / count if count else float("nan")


def median_run(runs: list[tuple[float, Any]]) -> tuple[float, Any]:
    ordered = sorted(runs, key=lambda run: run[0])
    return ordered[len(ordered) // 2]


def main() -> int:
    parser = argparse.ArgumentParser()
    parser.add_argument("--seconds", type=int, default=10)
    parser.add_argument("--connections", type=int, default=8)
    parser.add_argument("--repeats", type=int, default=3)
    parser.add_argument("--bare-server", type=int, help=argparse.SUPPRESS)
    parser.add_argument("--memoised-server", type=int, help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.bare_server:
        serve_bare(args.bare_server)
        return 0
    if args.memoised_server:
        serve_memoised(args.memoised_server)
        return 0

    single = body(1)
    fleet = body(FLEET)
    with tempfile.TemporaryDirectory() as tmp_name:
        tmp = Path(tmp_name)
        svc_port, bare_port, memo_port = free_port(), free_port(), free_port()
        service_env = {
            "PLUMBLINE_ADMIN_TOKEN": TOKEN,
            # The per-token rate limit (50/s by default) would answer most of the
            # load with 429: this measures the assessment path, so it is off.
            "PLUMBLINE_RATE_LIMIT_PER_SECOND": "0",
        }
        svc = start_python(
            run_args(svc_port),
            {"PLUMBLINE_DATABASE_URL": f"sqlite:///{tmp / 'bench.db'}", **service_env},
            tmp / "service.log",
        )
        bare = start_python(
            [str(Path(__file__).resolve()), "--bare-server", str(bare_port)], {}, tmp / "bare.log"
        )
        memo = start_python(
            [str(Path(__file__).resolve()), "--memoised-server", str(memo_port)],
            {"PLUMBLINE_DATABASE_URL": f"sqlite:///{tmp / 'memo.db'}", **service_env},
            tmp / "memo.log",
        )
        svc_url = f"http://127.0.0.1:{svc_port}/v1/assessments"
        memo_url = f"http://127.0.0.1:{memo_port}/v1/assessments"
        try:
            wait_until_answers(f"http://127.0.0.1:{svc_port}/healthz", svc, tmp / "service.log")
            wait_until_answers(f"http://127.0.0.1:{bare_port}/docs", bare, tmp / "bare.log")
            wait_until_answers(f"http://127.0.0.1:{memo_port}/healthz", memo, tmp / "memo.log")
            # Warm every server up (imports, first connections) before measuring.
            for url in (
                svc_url,
                memo_url,
                *(
                    f"http://127.0.0.1:{bare_port}/{path}"
                    for path in ("bare", "bare-orjson", "statsmodels")
                ),
            ):
                rate(url, single, 2, 2, tmp)
            bare_rps, bare_cpu = measured_rate(
                f"http://127.0.0.1:{bare_port}/bare",
                single,
                args.seconds,
                args.connections,
                tmp,
                bare.pid,
            )
            orj_rps, orj_cpu = measured_rate(
                f"http://127.0.0.1:{bare_port}/bare-orjson",
                single,
                args.seconds,
                args.connections,
                tmp,
                bare.pid,
            )
            sm_rps, _ = measured_rate(
                f"http://127.0.0.1:{bare_port}/statsmodels",
                single,
                args.seconds,
                args.connections,
                tmp,
                bare.pid,
            )
            svc_rps, svc_cpu = measured_rate(
                svc_url, single, args.seconds, args.connections, tmp, svc.pid
            )
            per_pass = mean_per_pass(f"http://127.0.0.1:{svc_port}/metrics")
            wide_rps, _ = measured_rate(
                svc_url, single, args.seconds, 4 * args.connections, tmp, svc.pid
            )
            memo_rps, memo_cpu = measured_rate(
                memo_url, single, args.seconds, args.connections, tmp, memo.pid
            )
            stop(memo)
            bare_fleet_s, _ = median_run(
                timed_posts(f"http://127.0.0.1:{bare_port}/bare", fleet, args.repeats)
            )
            stop(bare)
            singles = timed_posts(svc_url, single, 200, expect=201)
            single_stages = mean_stages([r for _, r in singles])
            cpu0 = cpu_seconds(svc.pid)
            fleet_s, response = median_run(
                timed_posts(f"{svc_url}?store=false", fleet, args.repeats)
            )
            fleet_cpu = (cpu_seconds(svc.pid) - cpu0) / args.repeats
            verdict = response.json()["verdict"]
            stages = response.headers.get("server-timing", "")
        except ServerDidNotStart as exc:
            raise SystemExit(str(exc)) from None
        finally:
            stop(svc)
            stop(bare)
            stop(memo)
    cpu0 = time.process_time()
    loop_s = per_series_loop(fleet)
    loop_cpu = time.process_time() - cpu0
    tool = "wrk" if shutil.which("wrk") else "python asyncio loop"
    print(
        f"| measure | value |\n|---|---|\n"
        f"| load tool | {tool}, {args.connections} connections, {args.seconds} s |\n"
        f"| bare FastAPI endpoint, request.json(), req/s | {bare_rps:.0f} |\n"
        f"| bare FastAPI endpoint, orjson.loads, req/s | {orj_rps:.0f} |\n"
        f"| POST /v1/assessments, 1 x {N_OBS} stored, req/s | {svc_rps:.0f} |\n"
        f"| ratio (target >= 30%) | {100 * svc_rps / bare_rps:.1f}% |\n"
        f"| submissions per pass of the core (mean, from /metrics) | {per_pass:.1f} |\n"
        f"| same, {4 * args.connections} connections, req/s | {wide_rps:.0f} "
        f"({100 * wide_rps / bare_rps:.1f}%) |\n"
        f"| scale point: parse + statsmodels/scipy per request, req/s | {sm_rps:.0f} "
        f"({100 * sm_rps / bare_rps:.1f}%) |\n"
        f"| diagnostic: the service with its statistics memoised, req/s | {memo_rps:.0f} "
        f"({100 * memo_rps / bare_rps:.1f}%; per CPU second {memo_cpu:.0f}) |\n"
        f"| single-series stages (Server-Timing, mean ms) | {single_stages} |\n"
        f"| requests per server CPU second: bare / service | {bare_cpu:.0f} / {svc_cpu:.0f} "
        f"({100 * svc_cpu / bare_cpu:.1f}%) |\n"
        f"| requests per server CPU second: bare orjson / service | {orj_cpu:.0f} / "
        f"{svc_cpu:.0f} ({100 * svc_cpu / orj_cpu:.1f}%) |\n"
        f"| {FLEET} x {N_OBS}, store=false, end to end (median of {args.repeats}) | "
        f"{fleet_s:.2f} s (verdict {verdict}) |\n"
        f"| of which server stages (Server-Timing, ms) | {stages} |\n"
        f"| bare endpoint, same {FLEET}-series body (transfer + parse) | {bare_fleet_s:.2f} s |\n"
        f"| per-series statsmodels/scipy loop, 4 tests | {loop_s:.2f} s |\n"
        f"| speed-up (target >= 20x) | {loop_s / fleet_s:.1f}x |\n"
        f"| CPU seconds: service (mean per request) / loop | {fleet_cpu:.2f} / {loop_cpu:.2f} "
        f"({loop_cpu / fleet_cpu:.1f}x) |"
    )
    return 0


if __name__ == "__main__":
    sys.exit(main())
