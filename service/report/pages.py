"""Self-contained HTML pages: the fleet report and one page per series.

Pure functions from the stored assessment (an :class:`service.results.AssessmentDocument`, as
the API returns it) to an HTML string. Nothing
is fetched by the page: styles and the small sorting script are inline, charts are inline SVG,
and :data:`CONTENT_SECURITY_POLICY` (sent with every page) forbids any other source.
"""

from __future__ import annotations

import base64
import hashlib
import math
from collections.abc import Callable, Mapping, Sequence
from datetime import UTC, datetime
from html import escape
from typing import Any

from service import __version__
from service.core import CATALOGUE
from service.core.messages import fleet_message_rest
from service.results import (
    AssessmentDocument,
    CheckSummary,
    FleetSummary,
    Reason,
    SeriesCheck,
    SeriesResult,
    SeriesTable,
)

from .baseline import section as baseline_section
from .charts import Chart
from .style import PAGE_CSS

SEVERITY = {"fail": 3, "warn": 2, "pass": 1, "skipped": 0}
REASONS_SHOWN = 20
"""Reasons listed in full on the report; the rest sit behind a "show more" toggle..."""
REASONS_MAX = 500
"""...up to this many; beyond it the series table carries the detail."""
DISCLAIMER = "A verdict is statistical evidence, not a guarantee."

SORT_SCRIPT = """
(function () {
  var table = document.getElementById("series-table");
  if (!table) { return; }
  var body = table.tBodies[0];
  var heads = table.tHead.rows[0].cells;
  function key(row, i, num) {
    var v = row.cells[i].getAttribute("data-v");
    if (v === null) { v = row.cells[i].textContent; }
    if (!num) { return v.toLowerCase(); }
    var x = parseFloat(v);
    return isNaN(x) ? -Infinity : x;
  }
  Array.prototype.forEach.call(heads, function (th, i) {
    th.addEventListener("click", function () {
      var num = th.getAttribute("data-type") === "num";
      var desc = th.getAttribute("aria-sort") !== "descending";
      Array.prototype.forEach.call(heads, function (h) { h.removeAttribute("aria-sort"); });
      th.setAttribute("aria-sort", desc ? "descending" : "ascending");
      var rows = Array.prototype.slice.call(body.rows);
      rows.sort(function (a, b) {
        var ka = key(a, i, num), kb = key(b, i, num);
        var c = ka < kb ? -1 : (ka > kb ? 1 : 0);
        return desc ? -c : c;
      });
      var frag = document.createDocumentFragment();
      rows.forEach(function (r) { frag.appendChild(r); });
      body.appendChild(frag);
    });
  });
  var box = document.getElementById("series-filter");
  if (box) {
    box.addEventListener("input", function () {
      var q = box.value.toLowerCase();
      Array.prototype.forEach.call(body.rows, function (r) {
        r.hidden = q !== "" && r.cells[0].textContent.toLowerCase().indexOf(q) < 0;
      });
    });
  }
})();
"""

_SCRIPT_HASH = base64.b64encode(hashlib.sha256(SORT_SCRIPT.encode()).digest()).decode()
CONTENT_SECURITY_POLICY = (
    "default-src 'none'; "
    f"script-src 'sha256-{_SCRIPT_HASH}'; "
    "style-src 'unsafe-inline'; "
    "img-src data:; "
    "base-uri 'none'; form-action 'none'; frame-ancestors 'none'"
)
"""Nothing but the page itself: no script, style, font, image or request from elsewhere."""

SeriesHref = Callable[[str], str]
_TITLES = {spec.name: spec.title for spec in CATALOGUE}


def _e(value: Any) -> str:
    return escape("" if value is None else str(value), quote=True)


def _num(value: Any, digits: int = 3) -> str:
    if value is None or isinstance(value, bool):
        return "—" if value is None else str(value)
    if isinstance(value, int):
        return f"{value:,}"
    if isinstance(value, float):
        if not math.isfinite(value):
            return "—"
        if value != 0 and (abs(value) >= 1e7 or abs(value) < 1e-3):
            return f"{value:.{digits}g}"
        if abs(value) >= 10**digits:
            return f"{value:,.0f}"
        return f"{value:.{digits}g}"
    return _e(value)


def _p(value: Any) -> str:
    if not isinstance(value, (int, float)) or isinstance(value, bool) or not math.isfinite(value):
        return "—"
    return "< 0.0001" if value < 1e-4 else f"{value:.4f}"


def _share(value: Any) -> str:
    if not isinstance(value, (int, float)) or isinstance(value, bool) or not math.isfinite(value):
        return "—"
    return f"{100 * value:.1f}%"


def _sort_value(value: Any) -> str:
    if isinstance(value, (int, float)) and not isinstance(value, bool) and math.isfinite(value):
        return repr(float(value))
    return ""


def _title(check: Any) -> str:
    """The check's name in words (the catalogue's title), else its API name."""
    return _TITLES.get(str(check), str(check))


def _message(check: Any, message: Any) -> str:
    """The message without a leading ``"<check>: "`` or ``"<Title>: "`` (the check is shown
    beside it)."""
    text = "" if message is None else str(message)
    for prefix in (f"{check}: ", f"{_title(check)}: "):
        if check and text.startswith(prefix):
            text = text[len(prefix) :]
            break
    return _e(text)


def _fleet_reason(check: Any, message: Any) -> str:
    """A fleet-level reason's message after "<Title>, across the fleet:": without the title
    and without a leading "Across the fleet" of its own, so neither is said twice."""
    text = "" if message is None else str(message)
    for prefix in (f"{check}: ", f"{_title(check)}: "):
        if check and text.startswith(prefix):
            text = text[len(prefix) :]
            break
    if text.lower().startswith(_ACROSS):
        text = text[len(_ACROSS) :].lstrip(" ,")
    return _e(text)


_ACROSS = "across the fleet"


def _check_summary(c: CheckSummary) -> str:
    """The per-check table's last cell: what the message adds to the counts beside it."""
    return _e(fleet_message_rest(_title(c.name), str(c.message or ""))) or "—"


def _check_cell(check: Any) -> str:
    return (
        f'<span class="check-title">{_e(_title(check))}</span>'
        f'<code class="check-name">{_e(check)}</code>'
    )


def _status(status: Any) -> str:
    s = str(status) if status in SEVERITY else "skipped"
    return f'<span class="status {s}">{_e(s)}</span>'


def _page(title: str, body: str, *, script: bool = False) -> str:
    js = f"<script>{SORT_SCRIPT}</script>" if script else ""
    return (
        "<!DOCTYPE html>\n"
        '<html lang="en"><head><meta charset="utf-8">'
        '<meta name="viewport" content="width=device-width, initial-scale=1">'
        '<meta name="referrer" content="no-referrer">'
        '<link rel="icon" href="data:,">'
        f"<title>{_e(title)}</title><style>{PAGE_CSS}</style></head>"
        f"<body><main>{body}"
        f"<footer><p>{DISCLAIMER} Rendered by Plumbline {_e(__version__)}.</p></footer>"
        f"</main>{js}</body></html>\n"
    )


def _verdict(verdict: Any) -> str:
    v = str(verdict) if verdict in ("pass", "warn", "fail") else "skipped"
    return f'<div class="verdict {v}" data-verdict="{v}">{_e(v)}</div>'


def _facts(rows: Sequence[tuple[str, str]]) -> str:
    items = "".join(f"<dt>{_e(k)}</dt><dd>{v}</dd>" for k, v in rows)
    return f'<dl class="facts">{items}</dl>'


def _order(series: SeriesTable) -> list[int]:
    """The positions of ``series`` worst first (see :func:`series_order`), read column by
    column."""
    n = len(series)
    n_fail = [0] * n
    n_warn = [0] * n
    for name in series.check_names:
        for i, status in enumerate(series.check_column(name, "status")):
            if status == "fail":
                n_fail[i] += 1
            elif status == "warn":
                n_warn[i] += 1
    weights = [
        float(w) if isinstance(w, (int, float)) and math.isfinite(w) else 0.0
        for w in series.column("weight")
    ]
    keys = [
        (-SEVERITY.get(v, 0), -f, -w_, -wt, str(sid))
        for v, f, w_, wt, sid in zip(
            series.column("verdict"), n_fail, n_warn, weights, series.ids, strict=True
        )
    ]
    return sorted(range(n), key=keys.__getitem__)


def series_order(series: SeriesTable) -> list[SeriesResult]:
    """Worst first: verdict (fail, warn, pass), then more failed checks, more warned checks,
    larger weight, and finally the id, so the order is stable."""
    return [series[i] for i in _order(series)]


def _when(value: Any) -> str:
    """An ISO timestamp as ``2026-12-01 22:07 UTC``; anything else as given."""
    try:
        moment = datetime.fromisoformat(str(value).replace("Z", "+00:00"))
    except ValueError:
        return str(value)
    if moment.tzinfo is None:
        return moment.strftime("%Y-%m-%d %H:%M")
    return moment.astimezone(UTC).strftime("%Y-%m-%d %H:%M UTC")


def _header(assessment: AssessmentDocument, title: str, back: str = "", verdict: Any = None) -> str:
    """The page's header; ``verdict`` in place of the fleet's (a series page's own)."""
    policy = assessment.policy
    bits = [
        f"model <strong>{_e(assessment.model)}</strong>"
        f" version <strong>{_e(assessment.version)}</strong>",
        f"policy {_e(policy.name)} v{_e(policy.version)}",
    ]
    if assessment.created_at:
        bits.append(f"assessed {_e(_when(assessment.created_at))}")
    if assessment.id:
        bits.append(f"assessment <code>{_e(assessment.id)}</code>")
    labels = assessment.labels
    if labels:
        bits.append("labels " + ", ".join(f"{_e(k)}={_e(v)}" for k, v in sorted(labels.items())))
    shown = assessment.verdict if verdict is None else verdict
    return (
        f'<header class="top"><div>{back}<h1>{_e(title)}</h1>'
        f'<div class="meta">{" · ".join(bits)}</div></div>'
        f"{_verdict(shown)}</header>"
    )


def _reasons(reasons: Sequence[Reason], series_href: SeriesHref) -> str:
    if not reasons:
        return '<p class="note">No check warned or failed.</p>'

    def item(r: Reason) -> str:
        sid = r.series_id
        if sid is None:
            where, text = _ACROSS, _fleet_reason(r.check, r.message)
        else:
            where = f'<a href="{_e(series_href(str(sid)))}">{_e(sid)}</a>'
            text = _message(r.check, r.message)
        return (
            f'<li data-status="{_e(r.status)}" data-check="{_e(r.check)}">'
            f"{_status(r.status)} <strong>{_e(_title(r.check))}</strong>, "
            f"{where}: {text}</li>"
        )

    shown = "".join(item(r) for r in reasons[:REASONS_SHOWN])
    out = f'<ul class="reasons" id="reasons">{shown}</ul>'
    rest = reasons[REASONS_SHOWN:REASONS_MAX]
    if rest:
        out += (
            f"<details><summary>{len(rest)} more</summary>"
            f'<ul class="reasons">{"".join(item(r) for r in rest)}</ul></details>'
        )
    beyond = len(reasons) - REASONS_MAX
    if beyond > 0:
        out += f'<p class="note">{beyond:,} more reasons: see the series table below.</p>'
    return out


def _checks_table(checks: Sequence[CheckSummary]) -> str:
    if not checks:
        return '<p class="note">The policy enabled no check.</p>'
    rows = "".join(
        f'<tr data-check="{_e(c.name)}"><td>{_check_cell(c.name)}</td>'
        f"<td>{_status(c.status)}</td>"
        f'<td class="num">{_num(c.series_tested)}</td>'
        f'<td class="num">{_num(c.series_failed)}</td>'
        f'<td class="num">{_num(c.series_warned)}</td>'
        f'<td class="num">{_num(c.series_skipped)}</td>'
        f'<td class="num">{_share(c.failed_share)}</td>'
        f"<td>{_check_summary(c)}</td></tr>"
        for c in checks
    )
    return (
        '<div class="scroll"><table id="checks-table"><thead><tr><th>Check</th><th>Status</th>'
        '<th class="num">Tested</th><th class="num">Failed</th><th class="num">Warned</th>'
        '<th class="num">Skipped</th><th class="num">Failed share of volume</th>'
        f"<th>Summary</th></tr></thead><tbody>{rows}</tbody></table></div>"
    )


def _fleet_bias(fleet: FleetSummary) -> str:
    b = fleet.statistics.get("bias") or {}
    if not b:
        return '<p class="note">No fleet bias estimate in this assessment.</p>'
    return _facts(
        [
            ("Mean error (actual − fitted)", _num(b.get("mean_error"), 4)),
            ("Standard error", _num(b.get("std_error"), 4)),
            (
                "Percent bias",
                "—" if b.get("percent_bias") is None else f"{_num(b.get('percent_bias'), 3)}%",
            ),
            ("t statistic", _num(b.get("statistic"), 4)),
            ("p-value", _p(b.get("p_value"))),
        ]
    )


def _series_counts(assessment: AssessmentDocument) -> str:
    fleet = assessment.fleet
    parts = [f"{_num(fleet.n_series)} series"]
    for value, word in (
        (fleet.n_failed, "failed"),
        (fleet.n_warned, "warned"),
        (fleet.n_passed, "passed"),
    ):
        parts.append(f"{_num(value)} {word}")
    return " · ".join(parts)


def _series_table(series: SeriesTable, series_href: SeriesHref) -> str:
    # Read column by column: a fleet of thousands of series makes no record per series.
    n = len(series)
    names = series.check_names
    statuses = [series.check_column(name, "status") for name in names]
    bias = {
        key: series.section_column("bias", key) or (None,) * n
        for key in ("mean_error", "percent_bias", "tracking_signal")
    }
    ids, verdicts = series.ids, series.column("verdict")
    n_obs, weights = series.column("n_obs"), series.column("weight")
    rows = []
    for i in _order(series):
        failed = [name for name, st in zip(names, statuses, strict=True) if st[i] == "fail"]
        warned = [name for name, st in zip(names, statuses, strict=True) if st[i] == "warn"]
        sid = str(ids[i])
        mean_error, percent_bias, tracking = (bias[k][i] for k in bias)
        rows.append(
            f'<tr data-series="{_e(sid)}">'
            f'<td class="id"><a href="{_e(series_href(sid))}">{_e(sid)}</a></td>'
            f'<td data-v="{SEVERITY.get(verdicts[i], 0)}">{_status(verdicts[i])}</td>'
            f'<td data-v="{len(failed)}">{_e(", ".join(failed)) or "—"}</td>'
            f'<td data-v="{len(warned)}">{_e(", ".join(warned)) or "—"}</td>'
            f'<td class="num" data-v="{_sort_value(n_obs[i])}">{_num(n_obs[i])}</td>'
            f'<td class="num" data-v="{_sort_value(weights[i])}">{_num(weights[i])}</td>'
            f'<td class="num" data-v="{_sort_value(mean_error)}">'
            f"{_num(mean_error)}</td>"
            f'<td class="num" data-v="{_sort_value(percent_bias)}">'
            f"{_num(percent_bias)}</td>"
            f'<td class="num" data-v="{_sort_value(tracking)}">'
            f"{_num(tracking)}</td></tr>"
        )
    return (
        '<div class="filter"><label>Find a series: <input id="series-filter" type="search" '
        'placeholder="part of an id" autocomplete="off"></label></div>'
        '<div class="scroll"><table class="sortable" id="series-table"><thead><tr>'
        '<th>Series</th><th data-type="num" aria-sort="descending">Verdict</th>'
        '<th data-type="num">Failed checks</th><th data-type="num">Warned checks</th>'
        '<th class="num" data-type="num">Residuals</th>'
        '<th class="num" data-type="num">Weight</th>'
        '<th class="num" data-type="num">Mean error</th>'
        '<th class="num" data-type="num">% bias</th>'
        '<th class="num" data-type="num">Tracking signal</th>'
        f"</tr></thead><tbody>{''.join(rows)}</tbody></table></div>"
    )


def _figures(charts: Sequence[Chart]) -> str:
    return "".join(
        f'<figure class="chart{" wide" if c.wide else ""}" id="chart-{_e(c.name)}" '
        f'data-chart="{_e(c.name)}">{c.svg}'
        f"<figcaption>{_e(c.caption)}</figcaption></figure>"
        for c in charts
    )


def render_report(
    assessment: AssessmentDocument,
    *,
    series_href: SeriesHref,
    fleet_charts: Sequence[Chart] = (),
) -> str:
    """The fleet report: verdict, reasons, per-check table, the fleet's charts (when given:
    :func:`service.report.fleet_charts.render_fleet_charts`, whose size is bounded whatever
    the fleet's), fleet bias and the series list (worst first, sortable, each linking to
    ``series_href(series_id)``)."""
    title = f"Gate report: {assessment.model or 'assessment'}"
    body = (
        _header(assessment, title)
        + f'<p class="note">{_series_counts(assessment)}. {DISCLAIMER}</p>'
        + '<section class="card" id="reasons-section"><h2>Why: warnings and failures, '
        "worst first</h2>"
        + _reasons(assessment.reasons, series_href)
        + "</section>"
        + '<section class="card" id="checks-section"><h2>Checks across the fleet</h2>'
        + _checks_table(assessment.checks)
        + "</section>"
        + baseline_section(assessment)
        + (
            '<section class="card" id="fleet-charts-section"><h2>The fleet at a glance</h2>'
            f'<div class="charts">{_figures(fleet_charts)}</div></section>'
            if fleet_charts
            else ""
        )
        + '<section class="card" id="bias-section"><h2>Fleet bias</h2>'
        + _fleet_bias(assessment.fleet)
        + "</section>"
        + '<section class="card" id="series-section"><h2>Series, worst first</h2>'
        + '<p class="note">Click a column to sort; open a series for its diagnostic charts.</p>'
        + _series_table(assessment.series, series_href)
        + "</section>"
    )
    return _page(title, body, script=True)


def find_series(assessment: AssessmentDocument, series_id: str) -> SeriesResult | None:
    """The series with this id, or ``None``."""
    return assessment.series.find(series_id)


def _details_text(details: Mapping[str, Any] | None) -> str:
    if not details:
        return "—"
    return ", ".join(f"{_e(k)} {_num(v, 4)}" for k, v in details.items() if v is not None)


def _series_checks(checks: Sequence[SeriesCheck]) -> str:
    rows = "".join(
        f'<tr data-check="{_e(c.name)}"><td>{_check_cell(c.name)}</td>'
        f"<td>{_status(c.status)}</td>"
        f'<td class="num">{_num(c.statistic, 4)}</td>'
        f'<td class="num">{_p(c.p_value)}</td>'
        f'<td class="num">{_p(c.p_adjusted)}</td>'
        f"<td>{_details_text(c.details)}</td>"
        f"<td>{_message(c.name, c.message)}</td></tr>"
        for c in checks
    )
    return (
        '<div class="scroll"><table id="series-checks"><thead><tr><th>Check</th><th>Status</th>'
        '<th class="num">Statistic</th><th class="num">p-value</th>'
        '<th class="num">Adjusted p</th><th>Details</th><th>Summary</th></tr></thead>'
        f"<tbody>{rows}</tbody></table></div>"
    )


def neighbours(series: SeriesTable, series_id: str) -> tuple[str | None, str | None]:
    """The ids before and after ``series_id`` in the worst-first order of the fleet page."""
    all_ids = series.ids
    ids = [str(all_ids[i]) for i in _order(series)]
    try:
        i = ids.index(series_id)
    except ValueError:
        return None, None
    return (ids[i - 1] if i > 0 else None), (ids[i + 1] if i + 1 < len(ids) else None)


def render_series(
    assessment: AssessmentDocument,
    series: SeriesResult,
    charts: Sequence[Chart],
    *,
    report_href: str,
    previous: tuple[str, str] | None = None,
    following: tuple[str, str] | None = None,
) -> str:
    """One series' page: its verdict, bias, every check and the diagnostic charts.

    ``previous`` and ``following`` are ``(series_id, href)`` of its neighbours in the fleet
    page's worst-first order, for stepping through the failures one by one.
    """
    sid = str(series.id)
    bias = series.sections.get("bias") or {}
    steps = [f'<a href="{_e(report_href)}">← back to the fleet report</a>']
    if previous is not None:
        steps.append(f'<a rel="prev" href="{_e(previous[1])}">worse: {_e(previous[0])}</a>')
    if following is not None:
        steps.append(f'<a rel="next" href="{_e(following[1])}">next: {_e(following[0])} →</a>')
    back = f'<p class="meta">{" · ".join(steps)}</p>'
    header = _header(assessment, f"Series {sid}", back, verdict=series.verdict)
    sufficiency = series.check("data_sufficiency")
    dropped = None if sufficiency is None else sufficiency.details.get("burn_in")
    facts = _facts(
        [
            ("Fleet verdict", _status(assessment.verdict)),
            ("Residuals", _num(series.n_obs)),
            *([("Burn-in left out", f"the first {_num(dropped)} periods")] if dropped else []),
            ("Weight", _num(series.weight)),
            ("Mean error", _num(bias.get("mean_error"), 4)),
            (
                "95% interval of the mean",
                f"{_num(bias.get('ci_low'), 4)} to {_num(bias.get('ci_high'), 4)}",
            ),
            (
                "Percent bias",
                "—" if bias.get("percent_bias") is None else f"{_num(bias.get('percent_bias'))}%",
            ),
            ("Tracking signal", _num(bias.get("tracking_signal"))),
        ]
    )
    figures = _figures(charts)
    body = (
        header
        + f'<section class="card" id="summary-section"><h2>Summary</h2>{facts}</section>'
        + '<section class="card" id="checks-section"><h2>Checks</h2>'
        + _series_checks(series.checks)
        + "</section>"
        + '<section class="card" id="charts-section"><h2>Diagnostics</h2>'
        + f'<div class="charts">{figures}</div></section>'
    )
    return _page(f"{sid}: {assessment.model or 'assessment'}", body)
