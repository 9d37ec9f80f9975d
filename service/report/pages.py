"""Self-contained HTML pages: the fleet report and one page per series.

Pure functions from the stored assessment (the dict the API returns) to an HTML string. Nothing
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


def series_order(series: Sequence[Mapping[str, Any]]) -> list[Mapping[str, Any]]:
    """Worst first: verdict (fail, warn, pass), then more failed checks, more warned checks,
    larger weight, and finally the id, so the order is stable."""

    def counts(s: Mapping[str, Any]) -> tuple[int, int]:
        checks = s.get("checks") or []
        return (
            sum(1 for c in checks if c.get("status") == "fail"),
            sum(1 for c in checks if c.get("status") == "warn"),
        )

    def key(s: Mapping[str, Any]) -> tuple[Any, ...]:
        n_fail, n_warn = counts(s)
        weight = s.get("weight")
        w = float(weight) if isinstance(weight, (int, float)) and math.isfinite(weight) else 0.0
        return (-SEVERITY.get(str(s.get("verdict")), 0), -n_fail, -n_warn, -w, str(s.get("id")))

    return sorted(series, key=key)


def _when(value: Any) -> str:
    """An ISO timestamp as ``2026-12-01 22:07 UTC``; anything else as given."""
    try:
        moment = datetime.fromisoformat(str(value).replace("Z", "+00:00"))
    except ValueError:
        return str(value)
    if moment.tzinfo is None:
        return moment.strftime("%Y-%m-%d %H:%M")
    return moment.astimezone(UTC).strftime("%Y-%m-%d %H:%M UTC")


def _header(assessment: Mapping[str, Any], title: str, back: str = "") -> str:
    policy = assessment.get("policy") or {}
    bits = [
        f"model <strong>{_e(assessment.get('model'))}</strong>"
        f" version <strong>{_e(assessment.get('version'))}</strong>",
        f"policy {_e(policy.get('name'))} v{_e(policy.get('version'))}",
    ]
    if assessment.get("created_at"):
        bits.append(f"assessed {_e(_when(assessment.get('created_at')))}")
    if assessment.get("id"):
        bits.append(f"assessment <code>{_e(assessment.get('id'))}</code>")
    labels = assessment.get("labels") or {}
    if labels:
        bits.append("labels " + ", ".join(f"{_e(k)}={_e(v)}" for k, v in sorted(labels.items())))
    return (
        f'<header class="top"><div>{back}<h1>{_e(title)}</h1>'
        f'<div class="meta">{" · ".join(bits)}</div></div>'
        f"{_verdict(assessment.get('verdict'))}</header>"
    )


def _reasons(reasons: Sequence[Mapping[str, Any]], series_href: SeriesHref) -> str:
    if not reasons:
        return '<p class="note">No check warned or failed.</p>'

    def item(r: Mapping[str, Any]) -> str:
        sid = r.get("series_id")
        where = (
            f'<a href="{_e(series_href(str(sid)))}">{_e(sid)}</a>'
            if sid is not None
            else "across the fleet"
        )
        return (
            f'<li data-status="{_e(r.get("status"))}" data-check="{_e(r.get("check"))}">'
            f"{_status(r.get('status'))} <strong>{_e(_title(r.get('check')))}</strong>, "
            f"{where}: {_message(r.get('check'), r.get('message'))}</li>"
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


def _checks_table(checks: Sequence[Mapping[str, Any]]) -> str:
    if not checks:
        return '<p class="note">The policy enabled no check.</p>'
    rows = "".join(
        f'<tr data-check="{_e(c.get("name"))}"><td>{_check_cell(c.get("name"))}</td>'
        f"<td>{_status(c.get('status'))}</td>"
        f'<td class="num">{_num(c.get("series_tested"))}</td>'
        f'<td class="num">{_num(c.get("series_failed"))}</td>'
        f'<td class="num">{_num(c.get("series_warned"))}</td>'
        f'<td class="num">{_num(c.get("series_skipped"))}</td>'
        f'<td class="num">{_share(c.get("failed_share"))}</td>'
        f"<td>{_message(c.get('name'), c.get('message'))}</td></tr>"
        for c in checks
    )
    return (
        '<div class="scroll"><table id="checks-table"><thead><tr><th>Check</th><th>Status</th>'
        '<th class="num">Tested</th><th class="num">Failed</th><th class="num">Warned</th>'
        '<th class="num">Skipped</th><th class="num">Failed share of volume</th>'
        f"<th>Summary</th></tr></thead><tbody>{rows}</tbody></table></div>"
    )


def _fleet_bias(fleet: Mapping[str, Any]) -> str:
    b = fleet.get("bias") or {}
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


def _series_counts(assessment: Mapping[str, Any]) -> str:
    fleet = assessment.get("fleet") or {}
    series = assessment.get("series") or []
    n = fleet.get("n_series", len(series))
    parts = [f"{_num(n)} series"]
    for key, word in (("n_failed", "failed"), ("n_warned", "warned"), ("n_passed", "passed")):
        if key in fleet:
            parts.append(f"{_num(fleet[key])} {word}")
    return " · ".join(parts)


def _series_table(series: Sequence[Mapping[str, Any]], series_href: SeriesHref) -> str:
    rows = []
    for s in series_order(series):
        checks = s.get("checks") or []
        failed = [c["name"] for c in checks if c.get("status") == "fail"]
        warned = [c["name"] for c in checks if c.get("status") == "warn"]
        bias = s.get("bias") or {}
        sid = str(s.get("id"))
        verdict = s.get("verdict")
        rows.append(
            f'<tr data-series="{_e(sid)}">'
            f'<td class="id"><a href="{_e(series_href(sid))}">{_e(sid)}</a></td>'
            f'<td data-v="{SEVERITY.get(str(verdict), 0)}">{_status(verdict)}</td>'
            f'<td data-v="{len(failed)}">{_e(", ".join(failed)) or "—"}</td>'
            f'<td data-v="{len(warned)}">{_e(", ".join(warned)) or "—"}</td>'
            f'<td class="num" data-v="{_sort_value(s.get("n_obs"))}">{_num(s.get("n_obs"))}</td>'
            f'<td class="num" data-v="{_sort_value(s.get("weight"))}">{_num(s.get("weight"))}</td>'
            f'<td class="num" data-v="{_sort_value(bias.get("mean_error"))}">'
            f"{_num(bias.get('mean_error'))}</td>"
            f'<td class="num" data-v="{_sort_value(bias.get("percent_bias"))}">'
            f"{_num(bias.get('percent_bias'))}</td>"
            f'<td class="num" data-v="{_sort_value(bias.get("tracking_signal"))}">'
            f"{_num(bias.get('tracking_signal'))}</td></tr>"
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


def render_report(assessment: Mapping[str, Any], *, series_href: SeriesHref) -> str:
    """The fleet report: verdict, reasons, per-check table, fleet bias and the series list
    (worst first, sortable, each linking to ``series_href(series_id)``). No charts: those are
    drawn per series, on the series page, so a fleet of any size stays one light page."""
    series = assessment.get("series") or []
    title = f"Gate report: {assessment.get('model') or 'assessment'}"
    body = (
        _header(assessment, title)
        + f'<p class="note">{_series_counts(assessment)}. {DISCLAIMER}</p>'
        + '<section class="card" id="reasons-section"><h2>Why: warnings and failures, '
        "worst first</h2>"
        + _reasons(assessment.get("reasons") or [], series_href)
        + "</section>"
        + '<section class="card" id="checks-section"><h2>Checks across the fleet</h2>'
        + _checks_table(assessment.get("checks") or [])
        + "</section>"
        + '<section class="card" id="bias-section"><h2>Fleet bias</h2>'
        + _fleet_bias(assessment.get("fleet") or {})
        + "</section>"
        + '<section class="card" id="series-section"><h2>Series, worst first</h2>'
        + '<p class="note">Click a column to sort; open a series for its diagnostic charts.</p>'
        + _series_table(series, series_href)
        + "</section>"
    )
    return _page(title, body, script=True)


def find_series(assessment: Mapping[str, Any], series_id: str) -> Mapping[str, Any] | None:
    """The series entry with this id, or ``None``."""
    for s in assessment.get("series") or []:
        if str(s.get("id")) == series_id:
            return s
    return None


def _details_text(details: Mapping[str, Any] | None) -> str:
    if not details:
        return "—"
    return ", ".join(f"{_e(k)} {_num(v, 4)}" for k, v in details.items() if v is not None)


def _series_checks(checks: Sequence[Mapping[str, Any]]) -> str:
    rows = "".join(
        f'<tr data-check="{_e(c.get("name"))}"><td>{_check_cell(c.get("name"))}</td>'
        f"<td>{_status(c.get('status'))}</td>"
        f'<td class="num">{_num(c.get("statistic"), 4)}</td>'
        f'<td class="num">{_p(c.get("p_value"))}</td>'
        f'<td class="num">{_p(c.get("p_adjusted"))}</td>'
        f"<td>{_details_text(c.get('details'))}</td>"
        f"<td>{_message(c.get('name'), c.get('message'))}</td></tr>"
        for c in checks
    )
    return (
        '<div class="scroll"><table id="series-checks"><thead><tr><th>Check</th><th>Status</th>'
        '<th class="num">Statistic</th><th class="num">p-value</th>'
        '<th class="num">Adjusted p</th><th>Details</th><th>Summary</th></tr></thead>'
        f"<tbody>{rows}</tbody></table></div>"
    )


def neighbours(
    series: Sequence[Mapping[str, Any]], series_id: str
) -> tuple[str | None, str | None]:
    """The ids before and after ``series_id`` in the worst-first order of the fleet page."""
    ids = [str(s.get("id")) for s in series_order(series)]
    try:
        i = ids.index(series_id)
    except ValueError:
        return None, None
    return (ids[i - 1] if i > 0 else None), (ids[i + 1] if i + 1 < len(ids) else None)


def render_series(
    assessment: Mapping[str, Any],
    series: Mapping[str, Any],
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
    sid = str(series.get("id"))
    bias = series.get("bias") or {}
    steps = [f'<a href="{_e(report_href)}">← back to the fleet report</a>']
    if previous is not None:
        steps.append(f'<a rel="prev" href="{_e(previous[1])}">worse: {_e(previous[0])}</a>')
    if following is not None:
        steps.append(f'<a rel="next" href="{_e(following[1])}">next: {_e(following[0])} →</a>')
    back = f'<p class="meta">{" · ".join(steps)}</p>'
    header = _header({**assessment, "verdict": series.get("verdict")}, f"Series {sid}", back)
    facts = _facts(
        [
            ("Fleet verdict", _status(assessment.get("verdict"))),
            ("Residuals", _num(series.get("n_obs"))),
            ("Weight", _num(series.get("weight"))),
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
    figures = "".join(
        f'<figure class="chart{" wide" if c.wide else ""}" id="chart-{_e(c.name)}" '
        f'data-chart="{_e(c.name)}">{c.svg}'
        f"<figcaption>{_e(c.caption)}</figcaption></figure>"
        for c in charts
    )
    body = (
        header
        + f'<section class="card" id="summary-section"><h2>Summary</h2>{facts}</section>'
        + '<section class="card" id="checks-section"><h2>Checks</h2>'
        + _series_checks(series.get("checks") or [])
        + "</section>"
        + '<section class="card" id="charts-section"><h2>Diagnostics</h2>'
        + f'<div class="charts">{figures}</div></section>'
    )
    return _page(f"{sid}: {assessment.get('model') or 'assessment'}", body)
