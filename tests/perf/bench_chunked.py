"""Benchmark: a big fleet in a Parquet file assessed chunk by chunk, in bounded memory.

Run by hand (never collected by pytest)::

    python tests/perf/bench_chunked.py --series 1000000 --periods 52 [--file fleet.parquet]
        [--dask-workers 2] [--keep]

Writes an invented fleet (seeded; the weekly series of tests/perf/bench_core.py) in the CSV
upload's long layout to a Parquet file, one row per series and week, then, each in a fresh
subprocess so that its peak resident memory (``resource.getrusage`` ``ru_maxrss``) is its own:

(a) ``ParquetChunks`` + ``assess_chunks`` in one process;
(b) the same with the parts on a ``LocalCluster`` of ``--dask-workers`` worker processes (the
    figure is the driver's memory; each worker holds one part at a time).

Prints the time, the peak RSS and a digest of the result (verdict, reasons, check summaries,
fleet statistics and every per-series array), which must be the same for (a) and (b).
Target: (a) under 1.5 GB peak RSS for 1,000,000 x 52.
"""

from __future__ import annotations

import argparse
import hashlib
import json
import os
import platform
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))


def write_fleet(path: Path, n_series: int, periods: int, block: int = 50_000) -> None:
    import pyarrow as pa
    import pyarrow.parquet as pq

    from tests.perf.bench_core import invented_fleet

    writer = None
    for lo in range(0, n_series, block):
        k = min(block, n_series - lo)
        actuals, fitted = invented_fleet(k, periods, seed=20261203 + lo)
        ids = np.repeat(np.array([f"sku-{i:07d}" for i in range(lo, lo + k)]), periods)
        table = pa.table(
            {
                "series_id": pa.array(ids),
                "actual": pa.array(actuals.reshape(-1)),
                "fitted": pa.array(fitted.reshape(-1), from_pandas=True),  # NaN -> null
            }
        )
        if writer is None:
            writer = pq.ParquetWriter(path, table.schema)
        writer.write_table(table, row_group_size=1_000_000)
    assert writer is not None
    writer.close()


def digest(assessment) -> str:
    """A hash of everything the decision says: the verdict, reasons, summaries, fleet
    statistics and every per-series array."""
    h = hashlib.sha256()
    h.update(assessment.verdict.value.encode())
    for r in assessment.reasons:
        h.update(repr(r).encode())
    for s in assessment.summaries:
        h.update(repr(s).encode())
    fleet = {k: f.result.to_dict() for k, f in assessment.fleet.items()}
    h.update(json.dumps(fleet, sort_keys=True, default=str).encode())
    h.update(assessment.weights.tobytes())
    h.update(assessment.series_codes.tobytes())
    for name, r in assessment.results.checks.items():
        h.update(name.encode())
        h.update(r.statistic.tobytes())
        h.update(r.p_value.tobytes())
        h.update(assessment.p_adjusted[name].tobytes())
        h.update(assessment.status_codes[name].tobytes())
        for key, v in r.details.items():
            h.update(key.encode())
            h.update(v.tobytes() if v.dtype.kind != "O" else repr(v.tolist()).encode())
    return h.hexdigest()


def run(path: str, dask_workers: int) -> None:
    """One assessment of the file; prints a JSON line of its figures."""
    from service.core import default_policy
    from service.core.chunked import assess_chunks
    from service.ingest.parquet_chunks import ParquetChunks

    t0 = time.perf_counter()
    chunks = ParquetChunks(path)
    t_scan = time.perf_counter() - t0
    policy = default_policy()
    if dask_workers:
        from distributed import Client, LocalCluster

        with (
            LocalCluster(
                n_workers=dask_workers,
                threads_per_worker=1,
                processes=True,
                dashboard_address=None,
                memory_limit="2GiB",
            ) as cluster,
            Client(cluster) as client,
        ):
            t1 = time.perf_counter()
            a = assess_chunks(chunks, policy, executor=client, window=2 * dask_workers)
    else:
        t1 = time.perf_counter()
        a = assess_chunks(chunks, policy)
    t_assess = time.perf_counter() - t1
    rss = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024  # KiB -> MiB on Linux
    print(
        json.dumps(
            {
                "series": chunks.n_series,
                "periods": chunks.width,
                "dask_workers": dask_workers,
                "scan_s": round(t_scan, 1),
                "assess_s": round(t_assess, 1),
                "total_s": round(time.perf_counter() - t0, 1),
                "peak_rss_mib": round(rss),
                "verdict": a.verdict.value,
                "digest": digest(a),
            }
        )
    )


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--series", type=int, default=1_000_000)
    parser.add_argument("--periods", type=int, default=52)
    parser.add_argument("--file", type=str, default=None)
    parser.add_argument("--dask-workers", type=int, default=2)
    parser.add_argument("--keep", action="store_true", help="keep the Parquet file")
    parser.add_argument("--run", type=str, default=None, help=argparse.SUPPRESS)
    parser.add_argument("--workers", type=int, default=0, help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.run:
        run(args.run, args.workers)
        return
    path = Path(args.file) if args.file else Path(tempfile.mkdtemp()) / "fleet.parquet"
    if not path.exists():
        t0 = time.perf_counter()
        write_fleet(path, args.series, args.periods)
        print(f"wrote {path.stat().st_size / 1e6:.0f} MB in {time.perf_counter() - t0:.0f} s")
    print(f"{platform.processor() or platform.machine()}, {os.cpu_count()} cores")
    out = []
    for workers in (0, args.dask_workers) if args.dask_workers else (0,):
        proc = subprocess.run(
            [sys.executable, __file__, "--run", str(path), "--workers", str(workers)],
            check=True,
            capture_output=True,
            text=True,
        )
        line = proc.stdout.strip().splitlines()[-1]
        print(line)
        out.append(json.loads(line))
    if len(out) == 2:
        same = out[0]["digest"] == out[1]["digest"]
        print("dask result identical to one process:", same)
    if not args.keep and not args.file:
        path.unlink()


if __name__ == "__main__":
    main()
