"""Command-line benchmark, run by hand (not collected by pytest):

    python tests/perf/bench_cli.py [--series 4000] [--length 156]

Times, each as a fresh ``python -m service.cli`` process (start-up included):

1. ``plumbline --help``: the import cost a pipeline step pays before any work;
   target under 0.5 s (no scipy, numpy or web stack is imported for it).
2. ``plumbline demo``: the invented scenario written and assessed; target under 5 s.
3. ``plumbline assess FILE --offline --json`` on an invented fleet of ``--series`` series of
   ``--length`` observations (white-noise residuals around a level); reported with the file
   size, no target (the core's own speed is benchmarked with the service).
"""

from __future__ import annotations

import argparse
import json
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[2]


def timed(*argv: str) -> tuple[float, int]:
    start = time.perf_counter()
    proc = subprocess.run(
        [sys.executable, "-m", "service.cli", *argv],
        cwd=ROOT,
        stdout=subprocess.DEVNULL,
        stderr=subprocess.PIPE,
        text=True,
        timeout=600,
    )
    elapsed = time.perf_counter() - start
    if proc.returncode not in (0, 1):
        raise SystemExit(f"{' '.join(argv)} exited {proc.returncode}: {proc.stderr.strip()}")
    return elapsed, proc.returncode


def fleet(n: int, t: int, seed: int = 7) -> dict:
    rng = np.random.default_rng(seed)
    level = rng.uniform(20, 200, n)
    actuals = np.round(level[:, None] + rng.standard_normal((n, t)) * 0.1 * level[:, None], 2)
    series = [
        {
            "id": f"invented-{i}",
            "actuals": actuals[i].tolist(),
            "fitted": [round(float(level[i]), 2)] * t,
        }
        for i in range(n)
    ]
    return {"model": "bench-invented", "version": "1", "series": series}


def main() -> int:
    parser = argparse.ArgumentParser()
    parser.add_argument("--series", type=int, default=4000)
    parser.add_argument("--length", type=int, default=156)
    args = parser.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        help_s = min(timed("--help")[0] for _ in range(3))
        demo_s, _ = timed("demo", str(Path(tmp) / "demo"))
        path = Path(tmp) / "fleet.json"
        path.write_text(json.dumps(fleet(args.series, args.length)))
        size_mb = path.stat().st_size / 1e6
        offline_s, code = timed("assess", str(path), "--offline", "--json")
    print(
        f"plumbline --help          {help_s:6.2f} s   target < 0.5 s   "
        f"{'ok' if help_s < 0.5 else 'MISSED'}"
    )
    print(
        f"plumbline demo            {demo_s:6.2f} s   target < 5 s     "
        f"{'ok' if demo_s < 5 else 'MISSED'}"
    )
    print(
        f"assess --offline          {offline_s:6.2f} s   {args.series} x {args.length}, "
        f"{size_mb:.1f} MB JSON, exit {code}"
    )
    return 0


if __name__ == "__main__":
    sys.exit(main())
