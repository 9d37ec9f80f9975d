"""The report's section on the comparison with a baseline version: what was compared, the
fleet's figures side by side, and a chart of each series' relative error against its weight.

The chart is SVG written here directly (no plotting library): it sits on the fleet page, which
stays light for a fleet of any size, so at most :data:`MAX_POINTS` series are drawn (the
heaviest; the caption says when some are left out).
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from html import escape
from typing import Any

from service.results import AssessmentDocument

from .style import GRID, INK, MUTED, STATUS_COLOURS

CHECK = "baseline_accuracy"
FLEET_KEY = "baseline"
MAX_POINTS = 2000
WIDTH, HEIGHT = 640, 320
LEFT, RIGHT, TOP, BOTTOM = 64, 16, 16, 48


def _e(value: Any) -> str:
    return escape(str(value), quote=True)


def _num(value: Any, digits: int = 3) -> str:
    if value is None or (isinstance(value, float) and not math.isfinite(value)):
        return "—"
    if isinstance(value, bool):
        return "yes" if value else "no"
    if isinstance(value, int):
        return f"{value:,}"
    return f"{value:,.{digits}g}" if abs(value) < 1e6 else f"{value:,.0f}"


def _pct(value: Any) -> str:
    if value is None or (isinstance(value, float) and not math.isfinite(value)):
        return "—"
    return f"{100 * value:.1f}%"


def points(assessment: AssessmentDocument) -> list[tuple[str, float, float, str]]:
    """``(series_id, weight, relative_error, status)`` of every series with a finite,
    positive relative error and weight, heaviest first."""
    series = assessment.series
    if CHECK not in series.check_names:
        return []
    ratio = _detail_column(series, "relative_error")
    if ratio is None:
        return []
    status = series.check_column(CHECK, "status")
    weights = series.column("weight")
    out = []
    for sid, w, r, st in zip(series.ids, weights, ratio, status, strict=True):
        if r is None or w is None:
            continue
        r, w = float(r), float(w)
        if math.isfinite(r) and math.isfinite(w) and r > 0 and w > 0:
            out.append((str(sid), w, r, str(st)))
    out.sort(key=lambda p: -p[1])
    return out


def _detail_column(series: Any, key: str) -> tuple[Any, ...] | None:
    """Detail ``key`` of the baseline check for every series, or ``None``."""
    for c in series.columns.checks:
        if c.name == CHECK:
            values = c.details.get(key)
            if values is None:
                return None
            return values if series.whole else values[series.start : series.stop]
    return None


def _ticks(low: float, high: float) -> list[float]:
    """Powers of ten, with 2 and 5 between them when the span is short, within [low, high]
    (log10 units)."""
    lo, hi = math.floor(low), math.ceil(high)
    steps = (1.0,) if hi - lo > 3 else (1.0, 2.0, 5.0)
    out = [math.log10(s) + k for k in range(lo, hi + 1) for s in steps]
    return [t for t in out if low - 1e-9 <= t <= high + 1e-9]


def chart(drawn: Sequence[tuple[str, float, float, str]], margin: float | None) -> str:
    """The scatter of relative error (log scale, 1 = as accurate as the baseline) against
    weight (log scale), one dot per series coloured and titled by its status."""
    if not drawn:
        return '<p class="note">No series has a relative error to draw.</p>'
    xs = [math.log10(p[1]) for p in drawn]
    ys = [math.log10(p[2]) for p in drawn]
    refs = [0.0] + ([math.log10(1 + margin)] if margin else [])
    x0, x1 = min(xs), max(xs)
    y0, y1 = min(ys + refs), max(ys + refs)
    pad_x = (x1 - x0) * 0.05 or 0.5
    pad_y = (y1 - y0) * 0.08 or 0.1
    x0, x1, y0, y1 = x0 - pad_x, x1 + pad_x, y0 - pad_y, y1 + pad_y
    pw, ph = WIDTH - LEFT - RIGHT, HEIGHT - TOP - BOTTOM

    def px(x: float) -> float:
        return LEFT + (x - x0) / (x1 - x0) * pw

    def py(y: float) -> float:
        return TOP + (y1 - y) / (y1 - y0) * ph

    parts = [
        f'<svg xmlns="http://www.w3.org/2000/svg" viewBox="0 0 {WIDTH} {HEIGHT}" '
        f'role="img" aria-labelledby="baseline-chart-title" id="baseline-chart">'
        '<title id="baseline-chart-title">Relative error against the baseline by series '
        "weight</title>",
        f'<rect x="{LEFT}" y="{TOP}" width="{pw}" height="{ph}" fill="none" stroke="{GRID}"/>',
    ]
    for t in _ticks(x0, x1):
        x = px(t)
        parts.append(
            f'<line x1="{x:.1f}" y1="{TOP}" x2="{x:.1f}" y2="{TOP + ph}" stroke="{GRID}"/>'
            f'<text x="{x:.1f}" y="{TOP + ph + 16}" text-anchor="middle" font-size="11" '
            f'fill="{INK}">{_num(10**t)}</text>'
        )
    for t in _ticks(y0, y1):
        y = py(t)
        parts.append(
            f'<line x1="{LEFT}" y1="{y:.1f}" x2="{LEFT + pw}" y2="{y:.1f}" stroke="{GRID}"/>'
            f'<text x="{LEFT - 6}" y="{y + 4:.1f}" text-anchor="end" font-size="11" '
            f'fill="{INK}">{_num(10**t)}</text>'
        )
    for k, ref in enumerate(refs):
        y = py(ref)
        dash = "" if k == 0 else ' stroke-dasharray="5 4"'
        parts.append(
            f'<line x1="{LEFT}" y1="{y:.1f}" x2="{LEFT + pw}" y2="{y:.1f}" '
            f'stroke="{MUTED}" stroke-width="1.2"{dash}/>'
        )
    for (sid, w, r, st), x, y in zip(drawn, xs, ys, strict=True):
        colour = STATUS_COLOURS.get(st, MUTED)
        parts.append(
            f'<circle cx="{px(x):.1f}" cy="{py(y):.1f}" r="3" fill="{colour}" '
            f'fill-opacity="0.8" data-series="{_e(sid)}" data-status="{_e(st)}">'
            f"<title>{_e(sid)}: {_e(st)}, error {_num(r)} times the baseline's, weight "
            f"{_num(w)}</title></circle>"
        )
    parts.append(
        f'<text x="{LEFT + pw / 2}" y="{HEIGHT - 8}" text-anchor="middle" font-size="12" '
        f'fill="{INK}">Series weight (log scale)</text>'
        f'<text transform="translate(14 {TOP + ph / 2}) rotate(-90)" text-anchor="middle" '
        f'font-size="12" fill="{INK}">Error relative to the baseline (log scale)</text>'
        "</svg>"
    )
    return "".join(parts)


def _facts(rows: Sequence[tuple[str, str]]) -> str:
    items = "".join(f"<dt>{_e(k)}</dt><dd>{v}</dd>" for k, v in rows)
    return f'<dl class="facts">{items}</dl>'


def section(assessment: AssessmentDocument) -> str:
    """The section, or ``""`` when the assessment had no baseline."""
    block = assessment.extra.get("baseline")
    if not isinstance(block, Mapping):
        return ""
    fleet = assessment.fleet.statistics.get(FLEET_KEY) or {}
    summary = assessment.result.check(CHECK)
    version = _e(block.get("version"))
    asked = block.get("requested")
    compared = f"version {version} (assessment <code>{_e(block.get('assessment_id'))}</code>)"
    if asked != block.get("version"):
        compared += f", asked for as {_e(asked)}"
    rows = [
        ("Compared with", compared),
        ("Status", "—" if summary is None else _e(summary.status)),
        (
            "Matched",
            f"{_num(block.get('matched_series'))} series, "
            f"{_num(block.get('matched_periods'))} holdout periods "
            f"(by timestamp: {_num((block.get('matched_by') or {}).get('timestamp'))} series, "
            f"by position: {_num((block.get('matched_by') or {}).get('position'))})",
        ),
        (
            "Not matched",
            f"{_num(block.get('unmatched_series'))} series of this version, "
            f"{_num(block.get('baseline_only_series'))} of the baseline only, "
            f"{_num(block.get('unmatched_periods'))} periods of matched series",
        ),
        (
            "Relative MAE (this version / baseline)",
            f"{_num(fleet.get('relative_mae'), 4)} (95% CI {_num(fleet.get('ci_low'), 4)} to "
            f"{_num(fleet.get('ci_high'), 4)})",
        ),
        ("Series significantly worse", _num(fleet.get("series_worse"))),
    ]
    side = (
        '<table id="baseline-side-by-side"><thead><tr><th></th><th>This version</th>'
        f"<th>Baseline ({version})</th></tr></thead><tbody>"
        f"<tr><th>Mean error on matched periods</th><td>{_num(fleet.get('bias_new'), 4)}</td>"
        f"<td>{_num(fleet.get('bias_baseline'), 4)}</td></tr>"
        f"<tr><th>Percent bias</th><td>{_num(fleet.get('percent_bias_new'))}%</td>"
        f"<td>{_num(fleet.get('percent_bias_baseline'))}%</td></tr>"
        f"<tr><th>Interval coverage</th><td>{_pct(fleet.get('coverage_new'))}</td>"
        f"<td>{_pct(fleet.get('coverage_baseline'))}</td></tr></tbody></table>"
    )
    drawn = points(assessment)
    left_out = max(len(drawn) - MAX_POINTS, 0)
    margin = fleet.get("margin")
    caption = (
        "One dot per series: its holdout error relative to the baseline's on the matched "
        "periods (1 = as accurate; above 1 = less accurate) against its weight. Solid line: 1"
        + (f"; dashed: 1 + the policy's margin ({_num(margin)})" if margin else "")
        + "."
        + (f" The {left_out:,} lightest series are left out." if left_out else "")
    )
    return (
        '<section class="card" id="baseline-section"><h2>Against the baseline</h2>'
        + _facts(rows)
        + side
        + f'<figure class="chart wide">{chart(drawn[:MAX_POINTS], margin)}'
        + f"<figcaption>{_e(caption)}</figcaption></figure></section>"
    )
