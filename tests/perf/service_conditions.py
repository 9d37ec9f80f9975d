"""The gate's promises checked through the real service (run by hand, not collected by pytest).

Starts ``service.api.server.run`` on a free loopback port (SQLite in a temporary directory, the
rate limit off), POSTs invented fleets with simulated residuals as JSON to
``POST /v1/assessments?store=false`` and counts the verdicts, under conditions of the same kinds
as ``tests/perf/gate_study.py`` but with other seeds and parameters (white noise at T = 30, 80,
200; GARCH(1,1) 0.2/0.15/0.75 and 0.05/0.1/0.85; t(4) and t(5) errors; a common shock of
correlation 0.3; 20% missing at random; correct seasonal models m = 7 and m = 4; AR(1) 0.4 and
0.6; a 0.4 sd bias; ignored seasonality at m = 7 and m = 24; a +1.2 sd shift in the last 10
periods of 25% of series). Then it probes the fail-closed and edge-case promises of the README
with single requests (and the command line) and says for each whether it held.

    python tests/perf/service_conditions.py                      # everything, default reps
    python tests/perf/service_conditions.py --reps-large 50 --reps-small 200   # a quick look
    python tests/perf/service_conditions.py --only edges

Every figure is a proportion over independent fleets: its standard error is at most
``0.5 / sqrt(reps)`` (3.5 points at 200 fleets, 0.7 near 1%; 0.3 near 1% at 1,000 fleets).
All data are invented.
"""

from __future__ import annotations

import argparse
import json
import math
import os
import re
import subprocess
import sys
import tempfile
import threading
import time
from collections.abc import Callable
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import httpx
import numpy as np

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))

from tests.perf.gate_study import GENERATORS  # noqa: E402
from tests.serverproc import Server, log_tail  # noqa: E402

TOKEN = "verify-conditions-admin-token"
HEADERS = {"Authorization": f"Bearer {TOKEN}", "Content-Type": "application/json"}


def student(df: int) -> Callable[..., np.ndarray]:
    def gen(n: int, t: int, rng: np.random.Generator, **_: float) -> np.ndarray:
        return rng.standard_t(df, (n, t)) / math.sqrt(df / (df - 2))

    return gen


GEN: dict[str, Callable[..., np.ndarray]] = {**GENERATORS, "t4": student(4), "t5": student(5)}


# ------------------------------------------------------------------------------- conditions


@dataclass(frozen=True)
class Cond:
    label: str
    kind: str
    lengths: tuple[int, ...]
    params: dict[str, float] = field(default_factory=dict)
    season_length: int = 1
    missing: float = 0.0
    sizes: tuple[int, ...] = (1, 5, 200)
    sound: bool = True
    target: str = "fail <= 1%"
    allowed_warns: tuple[str, ...] = ()
    """Checks whose assumption the condition violates: the only ones that should warn."""


SOUND = (
    Cond("white noise", "white", (30, 80, 200)),
    Cond(
        "GARCH(1,1) 0.2/0.15/0.75",
        "garch",
        (120, 300),
        {"omega": 0.2, "alpha": 0.15, "beta": 0.75},
        allowed_warns=("arch_lm", "jarque_bera"),
    ),
    Cond(
        "GARCH(1,1) 0.05/0.1/0.85",
        "garch",
        (120, 300),
        {"omega": 0.05, "alpha": 0.1, "beta": 0.85},
        allowed_warns=("arch_lm", "jarque_bera"),
    ),
    Cond("t(4) errors", "t4", (60, 120), allowed_warns=("jarque_bera",)),
    Cond("t(5) errors", "t5", (60, 120), allowed_warns=("jarque_bera",)),
    Cond("common shock, correlation 0.3", "shock", (60, 120), {"rho": 0.3}),
    Cond("20% missing at random", "white", (100,), missing=0.2),
    Cond("correct seasonal model, m = 7", "white", (70, 140), season_length=7),
    Cond("correct seasonal model, m = 4", "white", (48, 100), season_length=4),
)

FLAWED = (
    Cond("AR(1) 0.4", "ar1", (80, 120), {"phi": 0.4}, sizes=(1, 50, 200), sound=False),
    Cond("AR(1) 0.6", "ar1", (80, 120), {"phi": 0.6}, sizes=(1, 50, 200), sound=False),
    Cond("bias 0.4 sd", "bias", (80, 120), {"shift": 0.4}, sizes=(1, 50, 200), sound=False),
    Cond(
        "m = 7 ignored (seasonal AR 0.5 at lag 7)",
        "sar",
        (60,),
        {"phi": 0.5, "lag": 7},
        season_length=7,
        sizes=(200,),
        sound=False,
        target="fail >= 90%",
    ),
    Cond(
        "m = 24 ignored (seasonal AR 0.5 at lag 24)",
        "sar",
        (120,),
        {"phi": 0.5, "lag": 24},
        season_length=24,
        sizes=(200,),
        sound=False,
        target="fail >= 90%",
    ),
    Cond(
        "+1.2 sd shift, last 10 periods, 25% of series",
        "recent",
        (100,),
        {"shift": 1.2, "share": 0.25, "window": 10},
        sizes=(200,),
        sound=False,
        target="fail >= 90%",
    ),
)


def flawed_target(c: Cond, n: int, t: int) -> str:
    if c.target != "fail <= 1%":
        return c.target
    return "fail >= 95% (fleets, T >= 104 in the README)" if n >= 50 else "(no target for 1)"


# ------------------------------------------------------------------------------- requests


def _numbers(a: np.ndarray) -> list[float | None]:
    out = np.round(a, 4).tolist()
    if np.isnan(a).any():
        return [None if v != v else v for v in out]
    return out


def fleet_body(c: Cond, n: int, t: int, rng: np.random.Generator, tag: str) -> dict[str, Any]:
    """An invented fleet: levels around 100, noise 5, the condition's residuals (sd 1)."""
    e = GEN[c.kind](n, t, rng, **c.params)
    level = rng.uniform(50, 150, size=(n, 1))
    actuals = level + 5.0 * rng.standard_normal((n, t))
    fitted = actuals - e
    if c.missing:
        fitted = np.where(rng.random((n, t)) < c.missing, np.nan, fitted)
    return {
        "model": "invented-verify",
        "version": tag,
        "season_length": c.season_length,
        "labels": {"scenario": "invented"},
        "series": [
            {"id": f"s{i}", "actuals": _numbers(actuals[i]), "fitted": _numbers(fitted[i])}
            for i in range(n)
        ],
    }


class Client:
    """Posts to the server; if the server process is found dead, says how it ended (exit code
    and its log's tail, on stderr and in ``restarts``), starts it again and resends."""

    def __init__(self, server: Server, threads: int) -> None:
        self.server = server
        self.url = server.url
        self.http = httpx.Client(
            base_url=self.url,
            headers=HEADERS,
            timeout=120.0,
            limits=httpx.Limits(max_connections=32),
        )
        self.pool = ThreadPoolExecutor(threads)
        self.lock = threading.Lock()
        self.restarts: list[str] = []

    def _revive(self) -> None:
        with self.lock:
            proc = self.server.proc
            if proc is not None and proc.poll() is None:
                return
            code = proc.returncode if proc is not None else None
            tail = log_tail(self.server.log, 1500)
            self.restarts.append(f"server exited with {code}")
            print(f"server exited with {code}; log tail:\n{tail}", file=sys.stderr, flush=True)
            self.server.start()

    def post(self, body: Any, params: str = "store=false&series=none") -> httpx.Response:
        content = json.dumps(body)
        for attempt in range(3):
            try:
                return self.http.post(f"/v1/assessments?{params}", content=content)
            except httpx.TransportError:
                if attempt == 2:
                    raise
                time.sleep(0.5)
                self._revive()
        raise AssertionError("unreachable")

    def many(self, bodies: list[Any], params: str) -> list[httpx.Response]:
        return list(self.pool.map(lambda b: self.post(b, params), bodies))


# ------------------------------------------------------------------------------- cells


@dataclass
class Cell:
    cond: Cond
    n: int
    t: int
    reps: int = 0
    fails: int = 0
    warns: int = 0
    errors: int = 0
    culprits: dict[str, int] = field(default_factory=dict)
    bias_p: list[float] = field(default_factory=list)
    lb_p: list[float] = field(default_factory=list)
    ts_problems: list[str] = field(default_factory=list)
    ts_seen: int = 0
    lag_problems: list[str] = field(default_factory=list)
    lag_seen: int = 0
    seconds: float = 0.0


def tracking_contradiction(chk: dict[str, Any]) -> str | None:
    """Why a tracking_signal sentence contradicts its number (None when it does not)."""
    ts, msg, status = chk.get("statistic"), chk.get("message") or "", chk["status"]
    if ts is None or status == "skipped":
        return None
    m = re.search(r"tracking signal ([+-]?[0-9.e+-]+)", msg)
    if m:
        shown = float(m.group(1))
        if abs(shown - ts) > max(0.01 * abs(ts), 0.01):
            return f"says {m.group(1)}, statistic {ts:.4g}"
    if "beyond the trade's limit" in msg and abs(ts) <= 4:
        return f"says beyond the limit of 4, statistic {ts:.4g}"
    if "run low" in msg and ts < 0:
        return f"says forecasts run low, statistic {ts:.4g} (negative errors)"
    if "run high" in msg and ts > 0:
        return f"says forecasts run high, statistic {ts:.4g} (positive errors)"
    if status == "pass" and abs(ts) > 4 and msg.startswith("no evidence"):
        return f"passes with 'no evidence' while |TS| = {abs(ts):.3g} > 4: {msg!r}"
    return None


def lag_contradiction(chk: dict[str, Any], m: int) -> str | None:
    """Whether an autocorrelation sentence names the largest tested autocorrelations and says
    'seasonal' exactly when the top lag is a multiple of m."""
    d, msg = chk.get("details") or {}, chk.get("message") or ""
    if chk["status"] not in ("warn", "fail"):
        return None
    raw = [(d.get(f"peak_lag_{j}"), d.get(f"peak_acf_{j}")) for j in (1, 2, 3)]
    peaks: list[tuple[int, float]] = [(int(lag), float(a)) for lag, a in raw if lag]
    if not peaks:
        return f"no peaks in details: {msg!r}"
    named = re.search(r"largest autocorrelations are at lags ((?:-?\d+ \([^)]*\)(?:, )?)+)", msg)
    if not named:
        return f"no lags named: {msg!r}"
    lags_named = [int(x) for x in re.findall(r"(\d+) \(", named.group(1))]
    if lags_named != [lag for lag, _ in peaks]:
        return f"names {lags_named}, details {peaks}"
    absvals = [abs(a) for _, a in peaks]
    if absvals != sorted(absvals, reverse=True):
        return f"peaks not in order of size: {peaks}"
    top = peaks[0][0]
    says = "seasonal, at a multiple" in msg
    if m > 1 and top % m == 0 and not says:
        return f"top lag {top} is a multiple of m = {m}, not said seasonal: {msg!r}"
    if says and not (m > 1 and top % m == 0):
        return f"says seasonal with top lag {top}, m = {m}"
    return None


def run_cell(client: Client, cell: Cell, reps: int, seed: int, detail: bool) -> Cell:
    rng = np.random.default_rng(seed)
    params = "store=false&series=all" if detail else "store=false&series=none"
    chunk = max(1, min(reps, 2000 // cell.n))
    start = time.monotonic()
    done = 0
    while done < reps:
        k = min(chunk, reps - done)
        bodies = [
            fleet_body(cell.cond, cell.n, cell.t, rng, f"{seed}-{done + i}") for i in range(k)
        ]
        for r in client.many(bodies, params):
            if r.status_code not in (200, 201):
                cell.errors += 1
                if cell.errors <= 3:
                    print(f"  {r.status_code}: {r.text[:300]}", file=sys.stderr)
                continue
            doc = r.json()
            v = doc["verdict"]
            cell.fails += v == "fail"
            cell.warns += v in ("warn", "fail")
            if v != "pass":
                names = {c["name"] for c in doc["checks"] if c["status"] in ("warn", "fail")}
                names |= {r["check"] for r in doc.get("reasons") or [] if not r.get("series_id")}
                for name in names:
                    cell.culprits[name] = cell.culprits.get(name, 0) + 1
            fa = (doc.get("fleet") or {}).get("autocorrelation") or {}
            m = cell.cond.season_length
            if fa.get("lag"):
                if bool(fa.get("seasonal")) != (m > 1 and int(fa["lag"]) % m == 0):
                    cell.lag_problems.append(
                        f"fleet: lag {fa['lag']} seasonal={fa.get('seasonal')} with m = {m}"
                    )
            for s in doc.get("series") or []:
                for c in s["checks"]:
                    if c["name"] == "bias" and c["p_value"] is not None:
                        cell.bias_p.append(c["p_value"])
                    elif c["name"] == "ljung_box":
                        if c["p_value"] is not None:
                            cell.lb_p.append(c["p_value"])
                        cell.lag_seen += c["status"] in ("warn", "fail")
                        why = lag_contradiction(c, cell.cond.season_length)
                        if why:
                            cell.lag_problems.append(f"{s['id']}: {why}")
                    elif c["name"] == "tracking_signal":
                        cell.ts_seen += 1
                        why = tracking_contradiction(c)
                        if why:
                            cell.ts_problems.append(f"{s['id']}: {why}")
        done += k
    cell.reps = done - cell.errors
    cell.seconds = time.monotonic() - start
    return cell


def culprit_text(cell: Cell) -> str:
    top = sorted(cell.culprits.items(), key=lambda kv: -kv[1])[:4]
    return ", ".join(f"{k} {v / max(cell.reps, 1):.1%}" for k, v in top) or "-"


def judge(cell: Cell) -> str:
    c, fr = cell.cond, cell.fails / max(cell.reps, 1)
    if cell.errors:
        return f"BROKEN: {cell.errors} non-2xx answers"
    if c.sound:
        notes = []
        se = math.sqrt(0.01 * 0.99 / max(cell.reps, 1))
        if fr > 0.01 + 2 * se:
            notes.append(f"fail {fr:.1%} > 1% beyond 2 se")
        elif fr > 0.01:
            notes.append(f"fail {fr:.1%} > 1% within 2 se")
        stray = {k: v for k, v in cell.culprits.items() if k not in c.allowed_warns}
        stray_rate = sum(stray.values()) / max(cell.reps, 1)
        if stray_rate > 0.05:
            notes.append(f"warns through {', '.join(sorted(stray))} ({stray_rate:.1%})")
        return "; ".join(notes) or "ok"
    if c.target.startswith("fail >= 90%"):
        return "ok" if fr >= 0.90 else f"MISSED: fail {fr:.1%} < 90%"
    if cell.n >= 50 and cell.t >= 104:
        return "ok" if fr >= 0.95 else f"below 95% ({fr:.1%})"
    return "-"


def size_rates(ps: list[float]) -> str:
    if not ps:
        return ""
    a = np.asarray(ps)
    return f"{(a < 0.01).mean():.2%} / {(a < 0.05).mean():.2%} (n = {a.size})"


# ------------------------------------------------------------------------------- edge probes


@dataclass
class Probe:
    promise: str
    request: str
    observed: str
    held: bool


def white_series(
    rng: np.random.Generator, t: int, sid: str = "a", level: float = 100.0
) -> dict[str, Any]:
    a = level + 5 * rng.standard_normal(t)
    f = a - rng.standard_normal(t)
    return {"id": sid, "actuals": _numbers(a), "fitted": _numbers(f)}


def envelope(series: list[dict[str, Any]], **extra: Any) -> dict[str, Any]:
    return {"model": "invented-edge", "version": "1", "series": series, **extra}


def short(body: Any, limit: int = 400) -> str:
    text = json.dumps(body, separators=(",", ":"))
    return text if len(text) <= limit else text[:limit] + f"... ({len(text)} chars)"


def first_reason(doc: dict[str, Any]) -> str:
    rs = reason_texts(doc)
    return (rs or ["(no reasons)"])[0][:200]


def reason_texts(doc: dict[str, Any]) -> list[str]:
    return [f"{r.get('series_id') or 'fleet'}: {r['message']}" for r in doc.get("reasons") or []]


def series_check(doc: dict[str, Any], name: str, i: int = 0) -> dict[str, Any]:
    return next(c for c in doc["series"][i]["checks"] if c["name"] == name)


def run_cli(args: list[str]) -> subprocess.CompletedProcess[str]:
    exe = Path(sys.executable).with_name("plumbline")
    return subprocess.run([str(exe), *args], capture_output=True, text=True, timeout=120)


def edge_probes(client: Client, tmp: Path) -> list[Probe]:
    out: list[Probe] = []
    rng = np.random.default_rng(20261204)
    P = "store=false&series=all"

    def post(body: Any) -> tuple[int, dict[str, Any]]:
        r = client.post(body, P)
        try:
            return r.status_code, r.json()
        except ValueError:
            return r.status_code, {"raw": r.text[:300]}

    # 1. every fitted value null: never pass; the CLI exits non-zero
    t = 30
    a = np.round(100 + 5 * rng.standard_normal(t), 2).tolist()
    body = envelope([{"id": "a", "actuals": a, "fitted": [None] * t}])
    st, doc = post(body)
    v = doc.get("verdict")
    out.append(
        Probe(
            "every fitted value null -> never pass (README: a series with no usable residual "
            "fails)",
            short(body, 200),
            f"{st}, verdict {v}; {first_reason(doc) if v else doc}",
            st in (200, 201) and v == "fail",
        )
    )
    path = tmp / "all-null.json"
    path.write_text(json.dumps(body))
    for mode in (["--offline"], ["--server", client.url, "--token", TOKEN, "--no-store"]):
        p = run_cli(["assess", str(path), *mode])
        out.append(
            Probe(
                f"every fitted value null -> CLI exit code non-zero ({mode[0]})",
                "plumbline assess all-null.json "
                + " ".join({client.url: "URL", TOKEN: "TOKEN"}.get(m, m) for m in mode),
                f"exit {p.returncode}; {(p.stdout + p.stderr).strip().splitlines()[:1]}",
                p.returncode != 0,
            )
        )
    # fleet: two sound series and one with no fitted values
    body = envelope(
        [
            white_series(rng, 60, "a"),
            white_series(rng, 60, "b"),
            {"id": "c", "actuals": _numbers(100 + rng.standard_normal(60)), "fitted": [None] * 60},
        ]
    )
    st, doc = post(body)
    sv = [s["verdict"] for s in doc.get("series", [])]
    out.append(
        Probe(
            "a fleet where one series has no fitted value -> that series fails, fleet never pass",
            "3 series of 60, series c fitted all null",
            f"{st}, fleet {doc.get('verdict')}, series {sv}",
            st in (200, 201) and doc.get("verdict") != "pass" and sv[2] == "fail",
        )
    )

    # 2. model_params >= lag count: the lags grow, the test is not skipped
    for t, k in ((100, 5), (100, 7), (30, 4)):
        s = white_series(rng, t)
        body = envelope([s], model_params=k)
        st, doc = post(body)
        c = series_check(doc, "ljung_box") if st in (200, 201) else {}
        d = c.get("details") or {}
        out.append(
            Probe(
                f"model_params >= lag count -> lags grow, not skipped (T = {t}, model_params {k})",
                f"one white-noise series of {t}, model_params {k}",
                f"{st}, ljung_box {c.get('status')}, lags {d.get('lags')}, df {d.get('df')}, "
                f"lags_grown {d.get('lags_grown')}; {c.get('message', '')[:120]}",
                st in (200, 201)
                and c.get("status") != "skipped"
                and (d.get("df") or 0) >= 1
                and bool(d.get("lags_grown")),
            )
        )
    # so many parameters that no lags are left even grown: skipped, so at best warn with reason
    s = white_series(rng, 60)
    body = envelope([s], model_params=40)
    st, doc = post(body)
    c = series_check(doc, "ljung_box") if st in (200, 201) else {}
    out.append(
        Probe(
            "ljung_box could not run (model_params 40 on T = 60) -> series at best warn, with "
            "its reason",
            "one white-noise series of 60, model_params 40",
            f"{st}, ljung_box {c.get('status')} ({c.get('message', '')[:100]}), series "
            f"{doc.get('series', [{}])[0].get('verdict')}, fleet {doc.get('verdict')}; "
            f"reasons {[r[:90] for r in reason_texts(doc)]}",
            st in (200, 201)
            and c.get("status") == "skipped"
            and doc.get("verdict") != "pass"
            and any("autocorrelat" in r.lower() for r in reason_texts(doc)),
        )
    )

    # 3. essential check could not run: all-zero residuals (bias and ljung_box skip), and a
    # series too short for the autocorrelation test
    a = _numbers(100 + 5 * rng.standard_normal(40))
    body = envelope([{"id": "a", "actuals": a, "fitted": a}])
    st, doc = post(body)
    stat = {c["name"]: c["status"] for c in doc.get("series", [{}])[0].get("checks", [])}
    out.append(
        Probe(
            "all-zero residuals (fitted = actuals): bias and ljung_box skip -> at best warn, "
            "with the reason",
            "one series of 40, fitted equal to actuals",
            f"{st}, verdict {doc.get('verdict')}, bias {stat.get('bias')}, ljung_box "
            f"{stat.get('ljung_box')}; {first_reason(doc)}",
            st in (200, 201) and doc.get("verdict") in ("warn", "fail") and bool(doc["reasons"]),
        )
    )
    for t in (2, 3, 5):
        s = white_series(rng, t)
        body = envelope([s])
        st, doc = post(body)
        stat = {c["name"]: c["status"] for c in doc.get("series", [{}])[0].get("checks", [])}
        out.append(
            Probe(
                f"series of {t}: essential checks could not run -> at best warn, with reason",
                short(body, 300),
                f"{st}, verdict {doc.get('verdict')}, bias {stat.get('bias')}, ljung_box "
                f"{stat.get('ljung_box')}; {first_reason(doc)}",
                st in (200, 201)
                and (
                    doc.get("verdict") != "pass"
                    or (stat.get("bias") != "skipped" and stat.get("ljung_box") != "skipped")
                ),
            )
        )

    # 4. a missing actual anywhere is a gap, not a rejected batch
    for where in ("first", "middle", "last", "last two, fitted present", "both null at end"):
        s = white_series(rng, 40)
        if where == "first":
            s["actuals"][0] = None
        elif where == "middle":
            s["actuals"][20] = None
        elif where == "last":
            s["actuals"][-1] = None
        elif where.startswith("last two"):
            s["actuals"][-2:] = [None, None]
        else:
            s["actuals"][-3:] = [None] * 3
            s["fitted"][-3:] = [None] * 3
        body = envelope([s])
        st, doc = post(body)
        ds = series_check(doc, "data_sufficiency")["details"] if st in (200, 201) else {}
        out.append(
            Probe(
                f"missing actual ({where}) -> a gap, not a rejected batch",
                f"one series of 40, actual null at {where}",
                f"{st}, verdict {doc.get('verdict')}, n_obs {ds.get('n_obs')}, n_missing "
                f"{ds.get('n_missing')}, n_leading {ds.get('n_leading')}",
                st in (200, 201) and ds.get("n_obs") is not None,
            )
        )

    # 5. burn-in: request-wide and per series; the CLI option
    s1, s2 = white_series(rng, 50, "a"), white_series(rng, 50, "b")
    s2["burn_in"] = 3
    body = envelope([s1, s2], burn_in=6)
    st, doc = post(body)
    got = []
    for i in (0, 1):
        d = series_check(doc, "data_sufficiency", i)["details"] if st in (200, 201) else {}
        got.append((d.get("burn_in"), d.get("n_obs")))
    out.append(
        Probe(
            "burn_in 6 request-wide, series b burn_in 3 (wins) -> first periods dropped",
            "two white-noise series of 50, burn_in 6, series[1].burn_in 3",
            f"{st}, (burn_in, n_obs): a {got[0]}, b {got[1]}",
            st in (200, 201) and got == [(6, 44), (3, 47)],
        )
    )
    # extreme first residuals dropped by the burn-in
    s = white_series(rng, 60)
    s["fitted"][0] = s["actuals"][0] - 60.0
    s["fitted"][1] = s["actuals"][1] + 50.0
    st0, doc0 = post(envelope([dict(s)]))
    st1, doc1 = post(envelope([dict(s)], burn_in=2))
    out.append(
        Probe(
            "burn_in 2 drops two extreme first residuals (60 and -50 sd)",
            "one white-noise series of 60 with residuals +60, -50 at t = 1, 2; with and "
            "without burn_in 2",
            f"without: {doc0.get('verdict')}, burn-in hint in reasons "
            f"{any('burn-in' in r for r in reason_texts(doc0))} "
            f"({first_reason(doc0)[:110]}); with: "
            f"{doc1.get('verdict')}, n_obs "
            f"{series_check(doc1, 'data_sufficiency')['details'].get('n_obs')}",
            st0 in (200, 201)
            and st1 in (200, 201)
            and series_check(doc1, "data_sufficiency")["details"].get("n_obs") == 58,
        )
    )
    s = white_series(rng, 20)
    st, doc = post(envelope([s], burn_in=20))
    out.append(
        Probe(
            "burn_in as long as the series -> fails closed",
            "one series of 20, burn_in 20",
            f"{st}, verdict {doc.get('verdict')}",
            st in (200, 201) and doc.get("verdict") == "fail",
        )
    )
    help_text = run_cli(["assess", "--help"]).stdout
    path = tmp / "burn.json"
    path.write_text(json.dumps(envelope([white_series(rng, 50)])))
    p = run_cli(["assess", str(path), "--offline", "--burn-in", "5", "--json"])
    try:
        cli_doc = json.loads(p.stdout)
        cli_burn = series_check(cli_doc, "data_sufficiency")["details"]
    except (ValueError, KeyError, StopIteration, IndexError):
        cli_burn = {"stdout": p.stdout[:200], "stderr": p.stderr[:200]}
    out.append(
        Probe(
            "CLI --burn-in exists and drops the periods",
            "plumbline assess burn.json --offline --burn-in 5 --json (one series of 50)",
            f"--burn-in in help: {'--burn-in' in help_text}; exit {p.returncode}; "
            f"burn_in {cli_burn.get('burn_in')}, n_obs {cli_burn.get('n_obs')}",
            "--burn-in" in help_text
            and cli_burn.get("burn_in") == 5
            and cli_burn.get("n_obs") == 45,
        )
    )

    # 6. weights given to a policy that does not use them: a 422 naming both; used otherwise
    for weighting in ("volume", "count"):
        s = white_series(rng, 30)
        s["weight"] = 3.0
        body = envelope(
            [s, white_series(rng, 30, "b")],
            policy={"name": f"invented-{weighting}", "fleet": {"weighting": weighting}},
        )
        st, doc = post(body)
        locs = [e.get("loc") for e in doc.get("errors") or []]
        text = json.dumps(doc)
        out.append(
            Probe(
                f"weight given, policy weighting {weighting!r} -> 422 naming both",
                short({**body, "series": "[a (weight 3), b]"}, 300),
                f"{st}, locs {locs}; {(doc.get('detail') or '')[:200]}",
                st == 422 and any("weight" in (loc or "") for loc in locs) and "weighting" in text,
            )
        )
    for weighting in ("given", "auto"):
        s = white_series(rng, 30)
        s["weight"] = 3.0
        body = envelope(
            [s, white_series(rng, 30, "b")],
            policy={"name": f"invented-{weighting}", "fleet": {"weighting": weighting}},
        )
        st, doc = post(body)
        w = [x.get("weight") for x in doc.get("series", [])]
        out.append(
            Probe(
                f"weight given, policy weighting {weighting!r} -> used",
                f"series a weight 3, b none; fleet.weighting {weighting}",
                f"{st}, series weights {w}",
                st in (200, 201) and w[:1] == [3.0],
            )
        )

    # 7. volume weighting counts forecasts as well as actuals
    t = 24
    zeros = [0.0] * t
    fives = [5.0] * t
    mixed_a = [10.0 if i % 2 else 0.0 for i in range(t)]
    mixed_f = [0.0 if i % 2 else 4.0 for i in range(t)]
    for weighting in ("auto", "volume"):
        body = envelope(
            [
                {"id": "sold-none", "actuals": zeros, "fitted": fives},
                {"id": "mixed", "actuals": mixed_a, "fitted": mixed_f},
                white_series(rng, t, "c"),
            ],
            policy={"name": f"invented-vol-{weighting}", "fleet": {"weighting": weighting}},
        )
        st, doc = post(body)
        wv = {x["id"]: x.get("weight") for x in doc.get("series", [])}
        out.append(
            Probe(
                f"volume weight = sum max(|actual|, |fitted|) (weighting {weighting!r})",
                "actuals 0 x 24, fitted 5 x 24 (expect 120); actuals 0/10 alternating, "
                "fitted 4/0 (expect 12 x 10 + 12 x 4 = 168)",
                f"{st}, weights sold-none {wv.get('sold-none')}, mixed {wv.get('mixed')}",
                st in (200, 201)
                and abs((wv.get("sold-none") or 0) - 120) < 1e-6
                and abs((wv.get("mixed") or 0) - 168) < 1e-6,
            )
        )

    # 8. reasons name the lags with the largest autocorrelations; "seasonal" at multiples of m
    for label, kind, params, m, t in (
        ("seasonal AR 0.6 at lag 7, m = 7", "sar", {"phi": 0.6, "lag": 7}, 7, 84),
        ("seasonal AR 0.6 at lag 7, m = 1 (not declared)", "sar", {"phi": 0.6, "lag": 7}, 1, 84),
        ("AR(1) 0.7, m = 7", "ar1", {"phi": 0.7}, 7, 84),
        ("seasonal AR 0.6 at lag 4, m = 4", "sar", {"phi": 0.6, "lag": 4}, 4, 60),
    ):
        cond = Cond(label, kind, (t,), params, season_length=m)
        body = fleet_body(cond, 20, t, rng, "lags")
        st, doc = post(body)
        bad, flagged, said_seasonal = [], 0, 0
        for s in doc.get("series", []):
            c = series_check({"series": [s]}, "ljung_box")
            if c["status"] in ("warn", "fail"):
                flagged += 1
                said_seasonal += "seasonal, at a multiple" in (c.get("message") or "")
            why = lag_contradiction(c, m)
            if why:
                bad.append(f"{s['id']}: {why}")
            # own check: the named peaks are the largest |acf| among the tested lags
            d = c.get("details") or {}
            if c["status"] in ("warn", "fail") and d.get("peak_lag_1"):
                i = int(s["id"][1:])
                e = np.asarray(body["series"][i]["actuals"]) - np.asarray(
                    body["series"][i]["fitted"]
                )
                e = e - e.mean()
                denom = float(e @ e)
                acf = {k: float(e[k:] @ e[:-k]) / denom for k in range(1, len(e) // 2)}
                lags = int(d.get("lags") or 0)
                tested = set(range(1, lags + 1))
                for j in (1, 2):
                    if m > 1 and len(e) >= (max(2 * m, 20) if j == 1 else 6 * m):
                        tested.add(j * m)
                top_own = sorted(tested, key=lambda k: -abs(acf.get(k, 0.0)))[:3]
                named = [int(d.get(f"peak_lag_{j}") or 0) for j in (1, 2, 3)]
                if top_own[0] != named[0]:
                    bad.append(
                        f"{s['id']}: top tested |acf| (own, sample acf) at lag {top_own[0]} "
                        f"({acf[top_own[0]]:.2f}), named {named}"
                    )
        all_reasons = " | ".join(reason_texts(doc))[:260]
        out.append(
            Probe(
                f"reasons name the largest-autocorrelation lags, 'seasonal' iff at a multiple "
                f"of m ({label})",
                f"20 invented series of {t}, season_length {m}",
                f"{st}, {flagged} series flagged, {said_seasonal} said seasonal; problems "
                f"{bad[:2]}; fleet reasons: {all_reasons}",
                st in (200, 201) and not bad,
            )
        )

    # 7b. the OpenAPI document says the same about the default weight
    oa = client.http.get("/openapi.json").text
    says_actuals_only = "Default: sum of |actuals|" in oa
    out.append(
        Probe(
            "the OpenAPI description of series[].weight says what the service does "
            "(volume = sum max(|actual|, |fitted|))",
            "GET /openapi.json, the series' weight field",
            "description: 'Default: sum of |actuals|.'"
            if says_actuals_only
            else "no 'sum of |actuals|' description",
            not says_actuals_only,
        )
    )

    # 1b. a large fleet where a few series have no fitted value at all
    ser = [white_series(rng, 60, f"s{i}") for i in range(200)]
    for i in range(3):
        ser[i]["fitted"] = [None] * 60
    st, doc = post(envelope(ser))
    sv = [x["verdict"] for x in doc.get("series", [])[:3]]
    out.append(
        Probe(
            "fleet of 200, 3 series with every fitted value null (1.5% of the weight, under the "
            "2% warn share): those series fail; the fleet (README share rule) may pass",
            "200 white-noise series of 60, s0-s2 fitted all null",
            f"{st}, fleet {doc.get('verdict')}, s0-s2 {sv}; fleet-level reasons "
            f"{[r['message'][:60] for r in doc.get('reasons', []) if not r.get('series_id')]}",
            st in (200, 201) and sv == ["fail"] * 3,
        )
    )

    # 9. the tracking signal's sentence never contradicts its number
    cases = []
    # beyond 4 but not significant: small steady recent bias on a noisy series
    e = rng.standard_normal(104)
    e[-12:] = np.abs(e[-12:]) * 0.3 + 0.1
    cases.append(("recent errors all positive, small (|TS| ~ 12, not significant?)", e))
    e = rng.standard_normal(104)
    e[-12:] -= 1.5
    cases.append(("recent -1.5 sd shift in the last 12", e))
    e = rng.standard_normal(104) * 0.01
    e[-12:] += 0.002
    cases.append(("tiny residuals, recent +0.2 sd (immaterial?)", e))
    e = rng.standard_normal(104)
    e[-12:] = rng.choice([-3.0, 3.2], 12)
    cases.append(("recent errors large, alternating sign", e))
    for label, e in cases:
        a = 100 + 5 * rng.standard_normal(len(e))
        body = envelope([{"id": "a", "actuals": _numbers(a), "fitted": _numbers(a - e)}])
        st, doc = post(body)
        c = series_check(doc, "tracking_signal") if st in (200, 201) else {}
        why = tracking_contradiction(c) if c else "no answer"
        out.append(
            Probe(
                f"tracking-signal sentence agrees with its number ({label})",
                f"one series of 104, {label}",
                f"{st}, {c.get('status')}, TS {c.get('statistic')}: {c.get('message', '')[:170]}",
                st in (200, 201) and why is None,
            )
        )
    return out


# ------------------------------------------------------------------------------- main


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--reps-large", type=int, default=200, help="fleets per cell, 50-200 series")
    ap.add_argument("--reps-small", type=int, default=1000, help="fleets per cell, 1 or 5 series")
    ap.add_argument("--seed", type=int, default=7331)
    ap.add_argument("--workers", type=int, default=2)
    ap.add_argument("--threads", type=int, default=8)
    ap.add_argument("--only", choices=("sound", "flawed", "edges"), action="append")
    ap.add_argument("--out", type=Path, help="also write the Markdown here")
    ap.add_argument("--server-log", type=Path, help="keep the server's log here")
    args = ap.parse_args()
    only = set(args.only or ("sound", "flawed", "edges"))
    lines: list[str] = []

    def emit(s: str = "") -> None:
        print(s, flush=True)
        lines.append(s)

    with tempfile.TemporaryDirectory() as d:
        tmp = Path(d)
        server = Server(
            f"sqlite:///{tmp / 'verify.db'}",
            args.server_log or tmp / "server.log",
            workers=args.workers,
            env={"PLUMBLINE_ADMIN_TOKEN": TOKEN, "PLUMBLINE_RATE_LIMIT_PER_SECOND": "0"},
        )
        with server:
            client = Client(server, args.threads)
            os.environ["PLUMBLINE_TOKEN"] = TOKEN
            t0 = time.monotonic()
            seed = args.seed
            for group, conds in (("sound", SOUND), ("flawed", FLAWED)):
                if group not in only:
                    continue
                emit(f"\n## {'Sound models (size)' if group == 'sound' else 'Flawed models'}\n")
                emit(
                    "| condition | T | series | fleets | fail | warn or fail | warns from | "
                    "target | judged | s |"
                )
                emit("|---|---|---|---|---|---|---|---|---|---|")
                cells = []
                for c in conds:
                    for t in c.lengths:
                        for n in c.sizes:
                            seed += 1
                            reps = args.reps_small if n <= 5 else args.reps_large
                            detail = n == 200 and (group == "sound" or c.kind in ("sar", "ar1"))
                            cell = run_cell(client, Cell(c, n, t), reps, seed, detail)
                            cells.append(cell)
                            target = c.target if c.sound else flawed_target(c, n, t)
                            emit(
                                f"| {c.label} | {t} | {n} | {cell.reps} | "
                                f"{cell.fails / max(cell.reps, 1):.1%} | "
                                f"{cell.warns / max(cell.reps, 1):.1%} | {culprit_text(cell)} | "
                                f"{target} | {judge(cell)} | {cell.seconds:.0f} |"
                            )
                if any(c.bias_p for c in cells):
                    emit(
                        "\nPer-series raw rejection rates at 1% / 5% (fleets of 200, series=all):\n"
                    )
                    emit(
                        "| condition | T | bias (EWC t; zero-mean residuals in every row) | "
                        "autocorrelation (the check: lag-1 regression and portmanteaus) |"
                    )
                    emit("|---|---|---|---|")
                    for cell in cells:
                        if cell.bias_p:
                            emit(
                                f"| {cell.cond.label} | {cell.t} | {size_rates(cell.bias_p)} | "
                                f"{size_rates(cell.lb_p)} |"
                            )
                emit(f"\nSentence checks over the {group} cells with series=all:")
                ts_seen = sum(c.ts_seen for c in cells)
                ts_bad = [p for c in cells for p in c.ts_problems]
                lag_seen = sum(c.lag_seen for c in cells)
                lag_bad = [p for c in cells for p in c.lag_problems]
                emit(
                    f"- tracking_signal sentences read: {ts_seen}; contradicting their number: "
                    f"{len(ts_bad)} {ts_bad[:3]}"
                )
                emit(
                    f"- autocorrelation warn/fail sentences read: {lag_seen}; naming other lags "
                    f"than the details' peaks or misusing 'seasonal': {len(lag_bad)} {lag_bad[:3]}"
                )
            if "edges" in only:
                emit("\n## Fail-closed and edge-case probes (single requests)\n")
                emit("| # | promise | request | observed | held |")
                emit("|---|---|---|---|---|")
                for i, p in enumerate(edge_probes(client, tmp), 1):
                    cell_text = [
                        x.replace("|", "/").replace("\n", " ")
                        for x in (p.promise, p.request, p.observed)
                    ]
                    emit(
                        f"| {i} | {cell_text[0]} | {cell_text[1]} | {cell_text[2]} | "
                        f"{'yes' if p.held else '**NO**'} |"
                    )
            emit(f"\nWall time {time.monotonic() - t0:.0f} s.")
            emit(f"Server restarts during the run: {len(client.restarts)} {client.restarts}")
    if args.out:
        args.out.write_text("\n".join(lines) + "\n")


if __name__ == "__main__":
    main()
