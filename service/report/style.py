"""The report's one visual style: colours, chart settings and the page's CSS.

Colours are the Okabe-Ito palette (Okabe & Ito 2008, "Color Universal Design"), chosen so
that every pair stays distinct for readers with the common forms of colour blindness. A status
is never told by colour alone: its name is always written beside it.
"""

from __future__ import annotations

from types import MappingProxyType

OKABE_ITO = MappingProxyType(
    {
        "black": "#000000",
        "orange": "#E69F00",
        "sky_blue": "#56B4E9",
        "bluish_green": "#009E73",
        "yellow": "#F0E442",
        "blue": "#0072B2",
        "vermillion": "#D55E00",
        "reddish_purple": "#CC79A7",
    }
)

INK = "#1F2328"
"""Text and axes."""
MUTED = "#59636E"
"""Secondary text, reference lines."""
GRID = "#D8DEE4"

# What each line of a chart stands for, one colour per role across every chart.
ROLE_COLOURS = MappingProxyType(
    {
        "residual": OKABE_ITO["blue"],
        "actual": INK,
        "forecast": OKABE_ITO["vermillion"],
        "interval": OKABE_ITO["sky_blue"],
        "benchmark": OKABE_ITO["bluish_green"],
        "fit": OKABE_ITO["orange"],
        "highlight": OKABE_ITO["reddish_purple"],
        "reference": MUTED,
    }
)

STATUS_COLOURS = MappingProxyType(
    {
        "pass": OKABE_ITO["bluish_green"],
        "warn": OKABE_ITO["orange"],
        "fail": OKABE_ITO["vermillion"],
        "skipped": MUTED,
    }
)

FIGURE_SIZE = (6.4, 4.0)
"""Inches; the SVG scales with the page width (two charts side by side)."""
WIDE_FIGURE_SIZE = (12.8, 4.6)
"""The holdout chart spans the page: time runs across it."""

CHART_RC = MappingProxyType(
    {
        "font.family": ["DejaVu Sans", "sans-serif"],
        "font.size": 10.5,
        "axes.titlesize": 11.5,
        "axes.titleweight": "bold",
        "axes.titlelocation": "left",
        "axes.labelsize": 10.5,
        "axes.labelcolor": INK,
        "axes.edgecolor": MUTED,
        "axes.linewidth": 0.8,
        "axes.spines.top": False,
        "axes.spines.right": False,
        "axes.grid": True,
        "axes.axisbelow": True,
        "grid.color": GRID,
        "grid.linewidth": 0.6,
        "xtick.color": MUTED,
        "ytick.color": MUTED,
        "xtick.labelcolor": INK,
        "ytick.labelcolor": INK,
        "legend.frameon": False,
        "legend.fontsize": 9.5,
        "lines.linewidth": 1.4,
        "figure.facecolor": "white",
        "axes.facecolor": "white",
        "svg.fonttype": "none",
    }
)

PAGE_CSS = f"""
:root {{ --ink: {INK}; --muted: {MUTED}; --grid: {GRID};
  --pass: {STATUS_COLOURS["pass"]}; --warn: {STATUS_COLOURS["warn"]};
  --fail: {STATUS_COLOURS["fail"]}; --skipped: {STATUS_COLOURS["skipped"]};
  --accent: {OKABE_ITO["blue"]}; }}
* {{ box-sizing: border-box; }}
body {{ margin: 0; font: 15px/1.45 system-ui, -apple-system, "Segoe UI", "DejaVu Sans",
  sans-serif; color: var(--ink); background: #F6F8FA; }}
main {{ max-width: 1240px; margin: 0 auto; padding: 24px 20px 48px; }}
header.top {{ display: flex; flex-wrap: wrap; gap: 16px; align-items: center;
  justify-content: space-between; border-bottom: 1px solid var(--grid); padding-bottom: 14px; }}
h1 {{ font-size: 22px; margin: 0; }}
h2 {{ font-size: 17px; margin: 28px 0 10px; }}
.meta {{ color: var(--muted); font-size: 13px; margin-top: 4px; }}
.meta code {{ font-size: 12px; }}
a {{ color: var(--accent); }}
.verdict {{ display: inline-flex; align-items: center; gap: 10px; font-weight: 700;
  font-size: 20px; padding: 8px 16px; border-radius: 6px; color: #fff;
  letter-spacing: .04em; text-transform: uppercase; }}
.verdict.pass {{ background: var(--pass); }}
.verdict.warn {{ background: var(--warn); color: #000; }}
.verdict.fail {{ background: var(--fail); }}
.status {{ display: inline-block; min-width: 4.6em; text-align: center; font-size: 12px;
  font-weight: 700; padding: 1px 6px; border-radius: 4px; border: 1.5px solid; }}
.status.pass {{ color: #00573F; border-color: var(--pass); }}
.status.warn {{ color: #6B4A00; border-color: var(--warn); background: #FFF6E0; }}
.status.fail {{ color: #8A3700; border-color: var(--fail); background: #FCEBE0; }}
.status.skipped {{ color: var(--muted); border-color: var(--grid); }}
.check-title {{ display: block; font-weight: 600; }}
.check-name {{ display: block; font-size: 12px; color: var(--muted); }}
.note {{ color: var(--muted); font-size: 13px; }}
section.card {{ background: #fff; border: 1px solid var(--grid); border-radius: 8px;
  padding: 4px 18px 16px; margin-top: 18px; }}
ul.reasons {{ margin: 0; padding-left: 0; list-style: none; }}
ul.reasons li {{ padding: 6px 0; border-bottom: 1px solid #EEF1F4; }}
ul.reasons li:last-child {{ border-bottom: 0; }}
table {{ border-collapse: collapse; width: 100%; font-size: 14px; }}
th, td {{ text-align: left; padding: 6px 8px; border-bottom: 1px solid #EEF1F4;
  vertical-align: top; }}
th {{ font-size: 12px; text-transform: uppercase; letter-spacing: .04em; color: var(--muted);
  white-space: nowrap; }}
td.num, th.num {{ text-align: right; font-variant-numeric: tabular-nums; white-space: nowrap; }}
td.id {{ min-width: 11em; overflow-wrap: anywhere; }}
#series-table {{ font-size: 13.5px; }}
table.sortable th {{ cursor: pointer; user-select: none; }}
table.sortable th[aria-sort="ascending"]::after {{ content: " \\25B2"; }}
table.sortable th[aria-sort="descending"]::after {{ content: " \\25BC"; }}
.filter {{ margin: 6px 0 10px; }}
.filter input {{ font: inherit; padding: 4px 8px; width: 280px; max-width: 100%;
  border: 1px solid var(--grid); border-radius: 4px; }}
dl.facts {{ display: grid; grid-template-columns: max-content 1fr; gap: 4px 18px;
  margin: 6px 0; }}
dl.facts dt {{ color: var(--muted); }}
dl.facts dd {{ margin: 0; font-variant-numeric: tabular-nums; }}
.charts {{ display: grid; grid-template-columns: repeat(auto-fit, minmax(460px, 1fr));
  gap: 8px 22px; }}
figure.chart {{ margin: 14px 0 0; }}
figure.chart.wide {{ grid-column: 1 / -1; }}
figure.chart svg {{ width: 100%; height: auto; display: block; }}
figure.chart figcaption {{ color: var(--muted); font-size: 13px; margin-top: 2px; }}
.scroll {{ overflow-x: auto; }}
footer {{ margin-top: 32px; color: var(--muted); font-size: 12px; }}
"""
