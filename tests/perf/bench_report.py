"""Benchmark, run by hand (not collected by pytest): report rendering for a large fleet.

    python tests/perf/bench_report.py [n_series]

Prints the time to draw the fleet page's charts and to render the fleet page for ``n_series``
series (default 10,000), and to draw one series page's charts. Uses the invented fleet of the
report tests.
"""

from __future__ import annotations

import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from service.report import (
    SeriesInputs,
    find_series,
    render_charts,
    render_report,
    render_series,
    series_diagnostics,
)
from service.report.fleet_charts import render_fleet_charts
from service.results import AssessmentDocument
from tests.report.fleet import assessment_of, invented_body


def main(n_series: int) -> None:
    body = invented_body(n_series, t=104, h=12)
    stored = assessment_of(body)
    t0 = time.perf_counter()
    a = AssessmentDocument.from_dict(stored)  # as the report endpoint reads the stored JSON
    t1 = time.perf_counter()
    html = render_report(a, series_href=lambda sid: f"series/{sid}")
    t2 = time.perf_counter()
    print(
        f"fleet page without its charts, {n_series} series: {t2 - t1:.3f} s, "
        f"{len(html) / 1e6:.1f} MB (reading the stored document before it: {t1 - t0:.3f} s)"
    )
    for attempt in ("first (imports matplotlib)", "second", "third"):
        t0 = time.perf_counter()
        charts = render_fleet_charts(a)
        t1 = time.perf_counter()
        html = render_report(a, series_href=lambda sid: f"series/{sid}", fleet_charts=charts)
        t2 = time.perf_counter()
        sizes = ", ".join(f"{c.name} {len(c.svg) / 1e3:.0f} kB" for c in charts)
        print(
            f"fleet charts, {attempt}: {t1 - t0:.3f} s ({sizes}); the page with them "
            f"{t2 - t1:.3f} s, {len(html) / 1e6:.1f} MB"
        )
    s = body["series"][1]
    entry = find_series(a, s["id"])
    for attempt in ("first (imports matplotlib)", "second"):
        t0 = time.perf_counter()
        d = series_diagnostics(
            SeriesInputs.from_mapping(s), entry, season_length=52, model_params=2
        )
        page = render_series(a, entry, render_charts(d), report_href="report")
        t1 = time.perf_counter()
        print(f"series page, {attempt}: {t1 - t0:.3f} s, {len(page) / 1e3:.0f} kB")


if __name__ == "__main__":
    main(int(sys.argv[1]) if len(sys.argv) > 1 else 10_000)
