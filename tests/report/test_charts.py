"""The series charts: valid inline SVG, labelled axes, the reference lines they promise."""

from __future__ import annotations

import subprocess
import sys
import xml.etree.ElementTree as ET

import numpy as np
import pytest

from service.report import (
    CHART_NAMES,
    SeriesInputs,
    find_series,
    render_chart,
    render_charts,
    series_diagnostics,
)
from service.report.style import OKABE_ITO, ROLE_COLOURS

SVG = "{http://www.w3.org/2000/svg}"


@pytest.fixture(scope="module")
def charts(body: dict, document) -> dict:
    s = body["series"][1]
    d = series_diagnostics(
        SeriesInputs.from_mapping(s),
        find_series(document, s["id"]),
        season_length=52,
        model_params=2,
    )
    return {c.name: c for c in render_charts(d)}


def _texts(svg: str) -> str:
    root = ET.fromstring(svg)
    assert root.tag == f"{SVG}svg"
    return " ".join("".join(t.itertext()) for t in root.iter(f"{SVG}text"))


def test_every_chart_is_standalone_svg(charts: dict) -> None:
    assert tuple(charts) == CHART_NAMES
    for c in charts.values():
        assert c.svg.startswith("<svg ")
        assert 'role="img"' in c.svg
        ET.fromstring(c.svg)  # well-formed XML
        # Nothing that would make the page fetch: no external hrefs, images, scripts, fonts.
        assert "<script" not in c.svg and "<image" not in c.svg and "@font-face" not in c.svg
        assert 'href="http' not in c.svg and "url(http" not in c.svg


@pytest.mark.parametrize(
    ("name", "words"),
    [
        (
            "residuals",
            [
                "Residuals over time",
                "Residual (actual − fitted)",
                "[series units]",
                "Date",
                "tracking-signal window",
            ],
        ),
        (
            "acf",
            [
                "Residual autocorrelation",
                "Lag [periods]",
                "Autocorrelation",
                "±1.96/√T = ±0.193 (T = 103)",
                "lags 1–5 tested for autocorrelation",
            ],
        ),
        (
            "histogram",
            [
                "Residual distribution",
                "Residual [series units]",
                "Density [1 / series unit]",
                "normal, mean",
            ],
        ),
        ("fitted", ["Residuals against fitted values", "Fitted value [series units]"]),
        (
            "holdout",
            [
                "Holdout: actuals against forecasts",
                "Value [series units]",
                "95% prediction interval",
                "best benchmark: seasonal naive",
                "model forecast",
                "holdout actuals",
            ],
        ),
    ],
)
def test_charts_are_labelled(charts: dict, name: str, words: list[str]) -> None:
    # 1.96 / sqrt(103) = 0.19312 (hand computation) for the ACF bound.
    text = _texts(charts[name].svg)
    for w in words:
        assert w in text, (name, w)


def test_charts_use_the_palette(charts: dict) -> None:
    svg = charts["holdout"].svg.lower()
    for role in ("forecast", "benchmark", "interval", "actual"):
        assert ROLE_COLOURS[role].lower() in svg, role
    assert set(ROLE_COLOURS.values()) - {"#1F2328", "#59636E"} <= set(OKABE_ITO.values())


def test_chart_ids_differ_between_charts(charts: dict) -> None:
    # Several SVGs share one HTML page: their clip-path ids must not collide.
    import re

    ids = [set(re.findall(r'\bid="([^"]+)"', c.svg)) for c in charts.values()]
    for i in range(len(ids)):
        for j in range(i + 1, len(ids)):
            assert not (ids[i] & ids[j])
    for c, own in zip(charts.values(), ids, strict=True):
        refs = set(re.findall(r'(?:url\(#|href="#)([^")]+)', c.svg))
        assert refs and refs <= own, c.name


def test_degenerate_series_still_draw() -> None:
    # Three identical residuals: no ACF, no distribution, but a page that says so.
    d = series_diagnostics(
        SeriesInputs.from_mapping(
            {"id": "flat", "actuals": [5.0, 5.0, 5.0, 5.0], "fitted": [None, 4.0, 4.0, 4.0]}
        )
    )
    assert "undefined" in _texts(render_chart("acf", d).svg)
    assert "undefined" in _texts(render_chart("histogram", d).svg)
    assert "no holdout" in _texts(render_chart("holdout", d).svg)
    empty = series_diagnostics(
        SeriesInputs.from_mapping({"id": "none", "actuals": [1.0, 2.0], "fitted": [None, None]})
    )
    assert "no residuals" in _texts(render_chart("residuals", empty).svg)
    assert all(c.name != "holdout" for c in render_charts(empty))
    with pytest.raises(ValueError, match="unknown chart"):
        render_chart("pie", d)


def test_number_axis_without_dates() -> None:
    y = list(np.linspace(10, 20, 30))
    d = series_diagnostics(
        SeriesInputs.from_mapping(
            {
                "id": "n",
                "actuals": y,
                "fitted": [None, *y[:-1]],
                "timestamps": [f"w{i}" for i in range(30)],
            }
        )
    )
    assert "Period" in _texts(render_chart("residuals", d).svg)


def test_report_modules_do_not_import_matplotlib() -> None:
    code = (
        "import sys; import service.report, service.links; "
        "from service.report import pages, diagnostics, charts; "
        "sys.exit(1 if 'matplotlib' in sys.modules else 0)"
    )
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True)
    assert done.returncode == 0, done.stderr or "matplotlib was imported"


def test_holdout_without_intervals_draws_no_band() -> None:
    y = [float(v) for v in 100 + 5 * np.sin(np.arange(40))]
    d = series_diagnostics(
        SeriesInputs.from_mapping(
            {
                "id": "h",
                "actuals": y,
                "fitted": [None, *y[:-1]],
                "holdout": {"actuals": [101.0, 99.0, 104.0], "forecasts": [100.0, 100.0, 100.0]},
            }
        )
    )
    assert d.holdout is not None and d.holdout.lower is None and d.holdout.level is None
    text = _texts(render_chart("holdout", d).svg)
    assert "model forecast" in text and "prediction interval" not in text
    assert "best benchmark" in text


@pytest.fixture(scope="module")
def long_series() -> tuple[dict, object]:
    """An invented series of 700 weekly residuals (the fleet of tests/report/fleet.py)."""
    from .fleet import document_of, invented_body

    body = invented_body(5, t=700, h=12)
    s = body["series"][2]  # the biased one
    d = series_diagnostics(
        SeriesInputs.from_mapping(s),
        find_series(document_of(body), s["id"]),
        season_length=52,
        model_params=2,
    )
    return s, d


def test_many_residuals_draw_a_line_not_a_band_of_markers(charts: dict, long_series) -> None:
    _s, d = long_series
    svg = render_chart("residuals", d).svg
    # matplotlib writes one <use> per marker (and per tick mark): 700 markers would be 700+.
    assert svg.count("<use") < 60
    assert charts["residuals"].svg.count("<use") > 100  # 103 residuals still get their dots


def test_residual_chart_draws_the_mean_residual(long_series) -> None:
    s, d = long_series
    actual = np.array(s["actuals"], dtype=float)
    fitted = np.array([np.nan if v is None else v for v in s["fitted"]], dtype=float)
    mean = float(np.nanmean(actual - fitted))  # numpy's mean of the residuals
    assert d.mean == pytest.approx(mean, rel=1e-12)
    assert f"mean residual {mean:+.3g}" in _texts(render_chart("residuals", d).svg)


def test_shading_is_visible(charts: dict) -> None:
    from service.report.charts import SHADE_ALPHA

    assert SHADE_ALPHA >= 0.2
    for name in ("residuals", "acf"):
        assert f"opacity: {SHADE_ALPHA}" in charts[name].svg, name


def test_isolated_values_are_found() -> None:
    from service.report.charts import isolated

    x = np.array([1.0, np.nan, 2.0, 3.0, np.nan, 4.0, np.nan, np.nan, 5.0])
    assert isolated(x).tolist() == [True, False, False, False, False, True, False, False, True]
