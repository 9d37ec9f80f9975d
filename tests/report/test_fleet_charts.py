"""The fleet page's charts: valid inline SVG whose size is bounded whatever the fleet's, and
numbers that agree with the stored document."""

from __future__ import annotations

import itertools
import re
import xml.etree.ElementTree as ET
from collections import Counter

import numpy as np
import pytest

from service.core import make_batch
from service.core.gate import assess
from service.core.policy import default_policy
from service.report import render_report
from service.report.fleet_charts import (
    BIAS_BINS,
    FAIL_MARKS_MAX,
    FLEET_CHART_NAMES,
    GRID_BINS,
    GRID_SERIES_MAX,
    bin_shares,
    fleet_columns,
    render_fleet_charts,
    weight_bins,
)
from service.results import AssessmentDocument

SVG = "{http://www.w3.org/2000/svg}"


def _texts(svg: str) -> list[str]:
    root = ET.fromstring(svg)
    return ["".join(t.itertext()) for t in root.iter(f"{SVG}text")]


def _elements(svg: str) -> Counter:
    return Counter(el.tag.removeprefix(SVG) for el in ET.fromstring(svg).iter())


def synthetic_document(n: int, *, t: int = 60, seed: int = 11) -> AssessmentDocument:
    """Invented: ``n`` series of ``t`` periods at levels 20-2,000, noise 5% of the level, the
    first tenth biased by 4% of the level (fixed seed)."""
    rng = np.random.default_rng(seed)
    level = rng.uniform(20.0, 2000.0, (n, 1))
    fitted = np.repeat(level, t, axis=1)
    e = rng.normal(0.0, 1.0, (n, t)) * level * 0.05
    e[: n // 10] += level[: n // 10] * 0.15
    batch = make_batch(fitted + e, fitted, ids=[f"bin-{i:05d}" for i in range(n)])
    result = assess(batch, default_policy()).to_dict()
    return AssessmentDocument.from_dict(
        {
            "id": None,
            "created_at": None,
            "model": "invented-bins",
            "version": "1",
            "stored": False,
            "labels": {},
            "season_length": 1,
            "model_params": 0,
            **result,
        }
    )


@pytest.fixture(scope="module")
def small(document: AssessmentDocument) -> dict:
    return {c.name: c for c in render_fleet_charts(document)}


def _assert_standalone(charts: dict) -> None:
    assert tuple(charts) == FLEET_CHART_NAMES
    for c in charts.values():
        assert c.svg.startswith("<svg ") and 'role="img"' in c.svg
        ET.fromstring(c.svg)
        assert "<script" not in c.svg and "<image" not in c.svg and "@font-face" not in c.svg
        assert 'href="http' not in c.svg and "url(http" not in c.svg
        assert c.caption and c.wide


def test_small_fleet_charts_are_standalone_svg(small: dict) -> None:
    _assert_standalone(small)


def test_small_fleet_grid_has_a_cell_per_series_and_check(assessment: dict, small: dict) -> None:
    n, k = len(assessment["series"]), len(assessment["series"][0]["checks"])
    assert n <= GRID_SERIES_MAX
    texts = _texts(small["grid"].svg)
    # Each cell writes its status: the letters' counts are the document's statuses' counts.
    statuses = Counter(c["status"] for s in assessment["series"] for c in s["checks"])
    letters = Counter(t for t in texts if t in ("F", "W", "P", "–"))
    assert sum(letters.values()) == n * k
    for status, letter in (("fail", "F"), ("warn", "W"), ("pass", "P"), ("skipped", "–")):
        assert letters[letter] == statuses[status], status
        assert f"{letter} {status}" in texts  # the legend
    # One row per series, heaviest at the top.
    heaviest = max(assessment["series"], key=lambda s: s["weight"])["id"]
    rows = [t for t in texts if t.startswith("cafe-")]
    assert len(rows) == n and heaviest.startswith(rows[0].rstrip("…"))


def test_fleet_columns_are_in_weight_order(assessment: dict, document) -> None:
    cols = fleet_columns(document)
    by_id = {s["id"]: s for s in assessment["series"]}
    assert list(cols.weights) == sorted((s["weight"] for s in assessment["series"]), reverse=True)
    for sid, pb, code in zip(cols.ids, cols.percent_bias, cols.bias_codes, strict=True):
        s = by_id[sid]
        assert pb == s["bias"]["percent_bias"]
        bias = next(c for c in s["checks"] if c["name"] == "bias")
        assert code == {"skipped": 0, "pass": 1, "warn": 2, "fail": 3}[bias["status"]]
    assert set(cols.p_values) <= {
        "bias",
        "tracking_signal",
        "ljung_box",
        "arch_lm",
        "jarque_bera",
        "benchmark_skill",
        "holdout_bias",
        "interval_coverage",
    }


def test_pvalue_panels_name_each_test_and_its_count(document, small: dict) -> None:
    cols = fleet_columns(document)
    texts = " ".join(_texts(small["pvalues"].svg))
    for name, p in cols.p_values.items():
        assert f"(n = {int(np.isfinite(p).sum())})" in texts, name
    assert "fleet (weighted): " in " ".join(_texts(small["bias"].svg))


@pytest.mark.parametrize("n", [1, 7, 40, 41, 1000, 10_001])
def test_weight_bins_split_evenly(n: int) -> None:
    edges = weight_bins(n, GRID_BINS)
    sizes = np.diff(edges)
    assert edges[0] == 0 and edges[-1] == n
    assert len(sizes) == min(GRID_BINS, n) and sizes.min() >= 1
    assert sizes.max() - sizes.min() <= 1


def test_bin_shares_count_each_bin() -> None:
    rng = np.random.default_rng(5)
    codes = rng.integers(0, 4, (103, 6)).astype(np.int8)
    edges = weight_bins(103, 10)
    fail, warn = bin_shares(codes, edges)
    for b, (lo, hi) in enumerate(itertools.pairwise(edges)):
        for j in range(codes.shape[1]):  # counted one by one
            cell = [int(v) for v in codes[lo:hi, j]]
            assert fail[b, j] == cell.count(3) / len(cell)
            assert warn[b, j] == cell.count(2) / len(cell)


def test_report_places_the_fleet_charts(document, small: dict) -> None:
    html = render_report(document, series_href=lambda s: "#", fleet_charts=tuple(small.values()))
    section = re.search(
        r'<section class="card" id="fleet-charts-section">(.*?)</section>', html, flags=re.S
    )
    assert section is not None
    assert re.findall(r'data-chart="(\w+)"', section.group(1)) == list(FLEET_CHART_NAMES)
    assert "fleet-charts-section" not in render_report(document, series_href=lambda s: "#")


def _assert_bounded(charts: dict, n: int) -> None:
    _assert_standalone(charts)
    total = sum(len(c.svg) for c in charts.values())
    assert total < 400_000, total
    grid = _elements(charts["grid"].svg)
    assert grid["path"] < 4 * GRID_BINS * 11 + 200  # cells, ticks and frame
    assert grid["text"] < 2 * GRID_BINS * 11 + 80
    bias = _elements(charts["bias"].svg)
    assert bias["use"] < FAIL_MARKS_MAX + 60  # the failing series marked, and the ticks
    texts = _texts(charts["grid"].svg)
    assert f"{n - n // GRID_BINS + 1:,}–{n:,}" in " ".join(texts)  # the last bin's label


def test_a_fleet_of_1200_is_drawn_in_bins() -> None:
    doc = synthetic_document(1200)
    charts = {c.name: c for c in render_fleet_charts(doc)}
    _assert_bounded(charts, 1200)
    assert "bias fails" in " ".join(_texts(charts["bias"].svg))
    assert f"{BIAS_BINS} bins" not in charts["bias"].caption  # the caption says what is drawn
    assert "bins of weight" in charts["bias"].caption


@pytest.mark.slow  # 10,000 series assessed, then drawn
def test_a_fleet_of_10000_stays_bounded() -> None:
    doc = synthetic_document(10_000)
    charts = {c.name: c for c in render_fleet_charts(doc)}
    _assert_bounded(charts, 10_000)
    failing = int((fleet_columns(doc).bias_codes == 3).sum())
    assert failing > FAIL_MARKS_MAX
    assert f"the {FAIL_MARKS_MAX} heaviest of {failing:,}" in " ".join(_texts(charts["bias"].svg))


@pytest.mark.parametrize(
    ("actuals", "fitted", "says"),
    [
        ([[5.0, 5.0, 5.0]], [[4.0, 4.0, 4.0]], None),  # one series, constant residuals
        ([[1.0] * 30] * 2, [[1.0] * 30] * 2, "no test ran on any series"),  # all zero
        ([[1.0, 2.0, 3.0]], [[np.nan] * 3], "no series has a percent bias"),  # no residual
    ],
)
def test_degenerate_fleets_still_draw(actuals, fitted, says) -> None:
    result = assess(make_batch(np.array(actuals), np.array(fitted)), default_policy()).to_dict()
    doc = AssessmentDocument.from_dict(
        {
            "id": None,
            "created_at": None,
            "model": "m",
            "version": "1",
            "stored": False,
            "labels": {},
            "season_length": 1,
            "model_params": 0,
            **result,
        }
    )
    charts = {c.name: c for c in render_fleet_charts(doc)}
    _assert_standalone(charts)
    if says:
        assert says in " ".join(t for c in charts.values() for t in _texts(c.svg))
