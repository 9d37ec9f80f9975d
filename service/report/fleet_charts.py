"""The fleet page's charts: which series and which checks fail, at a glance.

Three server-rendered SVG charts (matplotlib on its SVG canvas, like the series charts):

- ``grid``: a series x check status grid, heaviest series at the top. Up to
  :data:`GRID_SERIES_MAX` series each get a row, their status written in the cell as well as
  coloured; beyond that the series are cut, in weight order, into :data:`GRID_BINS` bins of
  (nearly) equal count and a cell shows the share of the bin's series that fail (its colour and
  its number), or, where none fails, the share that warns.
- ``bias``: each series' percent bias against its weight, with the fleet's weighted percent
  bias; up to :data:`SCATTER_MAX` series one marker each (shape and colour by the bias check's
  status), beyond that the median and the 50% and 90% ranges of bins of series in weight order,
  with the heaviest failing series (at most :data:`FAIL_MARKS_MAX`) marked.
- ``pvalues``: for every test, the histogram of its raw p-values over the series it tested,
  as shares of them, against the uniform share that a fleet where its null holds everywhere
  would give (p-values of a sound model are uniform; a pile at the left is evidence).

What is drawn is bounded whatever the fleet's size (the number of cells, markers and bars), and
the numbers are read from the stored document column by column with array operations, no loop
over series.
"""

from __future__ import annotations

import itertools
from dataclasses import dataclass
from typing import Any, Literal

import numpy as np

from service.core import CATALOGUE
from service.results import AssessmentDocument, SeriesTable

from .charts import Chart, _figure, _svg_text
from .style import GRID, INK, MUTED, ROLE_COLOURS, STATUS_COLOURS

FLEET_CHART_NAMES = ("grid", "bias", "pvalues")
GRID_SERIES_MAX = 40
"""Fleets up to this size get one grid row per series."""
GRID_BINS = 20
"""Rows of the grid for larger fleets: bins of series in weight order."""
SCATTER_MAX = 1000
"""Fleets up to this size get one bias marker per series."""
BIAS_BINS = 40
"""Bins of series in weight order for the bias chart of larger fleets."""
FAIL_MARKS_MAX = 300
"""The heaviest series whose bias fails marked on the binned bias chart."""
P_BINS = 10
"""Bins of the p-value histograms (width 0.1)."""

_CODE = {"skipped": 0, "pass": 1, "warn": 2, "fail": 3}
_LETTER = {0: "–", 1: "P", 2: "W", 3: "F"}
_KIND = {spec.name: spec.kind for spec in CATALOGUE}
_TITLE = {spec.name: spec.title for spec in CATALOGUE}


def _floats(values: Any) -> np.ndarray:
    """A column of JSON numbers (``None`` where missing) as floats, NaN where missing."""
    if values is None:
        return np.array([], dtype=float)
    return np.array(values, dtype=float)


def _codes(values: Any) -> np.ndarray:
    text = np.asarray(values, dtype=object).astype(str)
    out = np.zeros(text.shape, dtype=np.int8)
    for status, code in _CODE.items():
        out[text == status] = code
    return out


@dataclass(frozen=True, eq=False)
class FleetColumns:
    """The numbers the fleet charts draw, in weight order (heaviest first)."""

    ids: np.ndarray
    weights: np.ndarray
    checks: tuple[str, ...]
    codes: np.ndarray
    """(series, check) status codes: 0 skipped, 1 pass, 2 warn, 3 fail."""
    percent_bias: np.ndarray
    bias_codes: np.ndarray
    p_values: dict[str, np.ndarray]
    """Raw p-values of each test that tested any series (NaN where it did not)."""
    fleet_percent_bias: float | None


def fleet_columns(doc: AssessmentDocument) -> FleetColumns:
    """Read the stored document's series columns into arrays, heaviest series first."""
    series: SeriesTable = doc.series
    weights = _floats(series.column("weight"))
    order = np.argsort(-np.nan_to_num(weights, nan=-np.inf), kind="stable")
    checks = series.check_names
    codes = (
        np.stack([_codes(series.check_column(c, "status")) for c in checks], axis=1)[order]
        if checks and len(series)
        else np.zeros((len(series), len(checks)), dtype=np.int8)
    )
    bias = series.section_column("bias", "percent_bias")
    percent_bias = _floats(bias)[order] if bias is not None else np.full(len(series), np.nan)
    bias_codes = codes[:, checks.index("bias")] if "bias" in checks else np.zeros(len(series))
    p_values = {}
    for c in checks:
        if _KIND.get(c) != "test":
            continue
        p = _floats(series.check_column(c, "p_value"))[order]
        if np.isfinite(p).any():
            p_values[c] = p
    fleet_bias = (doc.fleet.statistics.get("bias") or {}).get("percent_bias")
    return FleetColumns(
        ids=np.asarray(series.ids, dtype=object)[order],
        weights=weights[order],
        checks=checks,
        codes=codes,
        percent_bias=percent_bias,
        bias_codes=np.asarray(bias_codes),
        p_values=p_values,
        fleet_percent_bias=float(fleet_bias) if isinstance(fleet_bias, (int, float)) else None,
    )


def weight_bins(n: int, bins: int) -> np.ndarray:
    """Edges ``0 = e_0 < e_1 < ... < e_k = n`` of ``min(bins, n)`` bins of consecutive series
    whose sizes differ by at most one."""
    k = max(min(bins, n), 1)
    return np.linspace(0, n, k + 1).round().astype(int)


def bin_shares(codes: np.ndarray, edges: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """The share of each bin's series (rows between consecutive ``edges``) that fail, and
    that warn, per check: two (bins, checks) arrays, from cumulative sums."""
    zero = np.zeros((1, codes.shape[1]))
    fail = np.concatenate((zero, np.cumsum(codes == 3, axis=0)))
    warn = np.concatenate((zero, np.cumsum(codes == 2, axis=0)))
    size = np.diff(edges)[:, None].astype(float)
    return np.diff(fail[edges], axis=0) / size, np.diff(warn[edges], axis=0) / size


def _short(text: str, width: int = 26) -> str:
    return text if len(text) <= width else text[: width - 1] + "…"


def _grid_axes(ax: Any, n_rows: int, checks: tuple[str, ...], labels: list[str]) -> None:
    ax.set_xlim(0, len(checks))
    ax.set_ylim(n_rows, 0)
    ax.set_xticks(np.arange(len(checks)) + 0.5)
    ax.set_xticklabels([_TITLE.get(c, c) for c in checks], rotation=30, ha="right")
    ax.set_yticks(np.arange(n_rows) + 0.5)
    ax.set_yticklabels(labels)
    ax.tick_params(length=0)
    ax.grid(False)
    for side in ("left", "bottom"):
        ax.spines[side].set_visible(False)


def _grid(fig: Any, cols: FleetColumns) -> str:
    from matplotlib.colors import BoundaryNorm, LinearSegmentedColormap, ListedColormap
    from matplotlib.patches import Patch

    n, checks = cols.codes.shape[0], cols.checks
    width, height = fig.get_size_inches()
    legend = 0 < n <= GRID_SERIES_MAX
    fig.subplots_adjust(
        left=2.55 / width,
        right=1 - (0.2 if legend else 1.0) / width,  # room for the colour bar's labels
        top=1 - 0.4 / height,
        bottom=(1.45 + (0.45 if legend else 0.0)) / height,
    )
    ax = fig.add_subplot()
    ax.set_title("Status of every check, heaviest series at the top")
    if n == 0 or not checks:
        ax.text(0.5, 0.5, "no series or no check", ha="center", va="center", color=MUTED)
        return "no series"
    if n <= GRID_SERIES_MAX:
        palette = ListedColormap([STATUS_COLOURS[s] for s in ("skipped", "pass", "warn", "fail")])
        ax.pcolormesh(
            cols.codes,
            cmap=palette,
            norm=BoundaryNorm([-0.5, 0.5, 1.5, 2.5, 3.5], palette.N),
            edgecolors="white",
            linewidth=1.5,
        )
        for (i, j), code in np.ndenumerate(cols.codes):
            ax.text(
                j + 0.5,
                i + 0.5,
                _LETTER[int(code)],
                ha="center",
                va="center",
                fontsize=9,
                fontweight="bold",
                color="black" if code == 2 else "white",
            )
        _grid_axes(ax, n, checks, [_short(str(s)) for s in cols.ids])
        ax.set_ylabel("Series (heaviest first)")
        handles = [
            Patch(color=STATUS_COLOURS[s], label=f"{_LETTER[_CODE[s]]} {s}")
            for s in ("fail", "warn", "pass", "skipped")
        ]
        ax.legend(
            handles=handles,
            loc="upper center",
            bbox_to_anchor=(0.5, -1.2 / (height - 0.4 - 1.9)),  # 1.2 in below the axes
            ncols=4,
            fontsize=9.5,
        )
        return f"{n} series, one row each"
    edges = weight_bins(n, GRID_BINS)
    fail, warn = bin_shares(cols.codes, edges)
    total = float(np.nansum(cols.weights)) or 1.0
    cum = np.concatenate(([0.0], np.cumsum(np.nan_to_num(cols.weights))))
    labels = [
        f"{a + 1:,}–{b:,} · {(cum[b] - cum[a]) / total:.0%} of weight"
        for a, b in itertools.pairwise(edges)
    ]
    # Ten steps of 10%: easier to read than a continuous scale, and its colour bar stays
    # vector (matplotlib rasterises a bar of many steps into an embedded image).
    ramp = LinearSegmentedColormap.from_list("fails", ["#FFFFFF", STATUS_COLOURS["fail"]])
    steps = np.linspace(0.0, 1.0, 11)
    scale = ListedColormap(ramp(np.linspace(0.0, 1.0, 10)))
    mesh = ax.pcolormesh(
        fail,
        cmap=scale,
        norm=BoundaryNorm(steps, scale.N),
        edgecolors=GRID,
        linewidth=0.5,
    )
    for (i, j), share in np.ndenumerate(fail):
        if share > 0:
            text, colour = f"{share:.0%}" if share >= 0.01 else "<1%", "black"
            if share > 0.55:
                colour = "white"
        elif warn[i, j] > 0:
            text, colour = f"w {warn[i, j]:.0%}" if warn[i, j] >= 0.01 else "w <1%", MUTED
        else:
            continue
        ax.text(j + 0.5, i + 0.5, text, ha="center", va="center", fontsize=8, color=colour)
    _grid_axes(ax, len(labels), checks, labels)
    ax.set_ylabel(f"Series in weight order, {len(labels)} bins")
    bar = fig.colorbar(mesh, ax=ax, fraction=0.03, pad=0.01, ticks=steps[::2])
    bar.ax.yaxis.set_major_formatter(lambda v, _pos: f"{v:.0%}")
    bar.set_label("Share of the bin's series that fail")
    bar.outline.set_edgecolor(GRID)
    return f"{n:,} series in {len(labels)} bins"


def _bias(fig: Any, cols: FleetColumns) -> str:
    ax = fig.add_subplot()
    ax.set_title("Percent bias of each series against its weight")
    ok = np.isfinite(cols.percent_bias) & np.isfinite(cols.weights)
    if not ok.any():
        ax.text(0.5, 0.5, "no series has a percent bias", ha="center", va="center", color=MUTED)
        return "no percent bias"
    w, b, codes = cols.weights[ok], cols.percent_bias[ok], cols.bias_codes[ok]
    positive = w > 0
    log = bool(positive.all() and w.max() / w.min() > 20)
    ax.axhline(0.0, color=ROLE_COLOURS["reference"], linewidth=1.0, zorder=1)
    markers = {3: ("s", "fail"), 2: ("^", "warn"), 1: ("o", "pass"), 0: ("x", "skipped")}
    if w.size <= SCATTER_MAX:
        for code in (1, 0, 2, 3):
            here = codes == code
            if here.any():
                shape, status = markers[code]
                ax.scatter(
                    w[here],
                    b[here],
                    marker=shape,
                    s=22 if w.size <= 100 else 10,
                    color=STATUS_COLOURS[status],
                    alpha=0.85,
                    linewidths=0.8 if shape == "x" else 0,
                    label=f"bias {status} ({int(here.sum()):,})",
                    zorder=3,
                )
        what = f"{w.size:,} series, one marker each"
    else:
        edges = weight_bins(w.size, BIAS_BINS)
        x = np.array([np.median(w[a:c]) for a, c in itertools.pairwise(edges)])
        qs = np.array(
            [np.percentile(b[a:c], [5, 25, 50, 75, 95]) for a, c in itertools.pairwise(edges)]
        )
        band = ROLE_COLOURS["interval"]
        ax.fill_between(
            x,
            qs[:, 0],
            qs[:, 4],
            color=band,
            alpha=0.3,
            linewidth=0,
            label="90% of the bin's series",
        )
        ax.fill_between(
            x, qs[:, 1], qs[:, 3], color=band, alpha=0.6, linewidth=0, label="middle 50%"
        )
        ax.plot(x, qs[:, 2], color=ROLE_COLOURS["residual"], linewidth=1.6, label="median")
        failing = np.flatnonzero(codes == 3)
        if failing.size:
            shown = failing[:FAIL_MARKS_MAX]  # weight order: the heaviest first
            ax.scatter(
                w[shown],
                b[shown],
                marker="s",
                s=10,
                color=STATUS_COLOURS["fail"],
                linewidths=0,
                zorder=3,
                label=(
                    f"bias fails ({failing.size:,})"
                    if failing.size <= FAIL_MARKS_MAX
                    else f"bias fails: the {FAIL_MARKS_MAX} heaviest of {failing.size:,}"
                ),
            )
        what = f"{w.size:,} series in {len(x)} bins of weight"
    if cols.fleet_percent_bias is not None and np.isfinite(cols.fleet_percent_bias):
        ax.axhline(
            cols.fleet_percent_bias,
            color=ROLE_COLOURS["fit"],
            linestyle="--",
            linewidth=1.6,
            zorder=2,
            label=f"fleet (weighted): {cols.fleet_percent_bias:+.2f}%",
        )
    if log:
        ax.set_xscale("log")
    ax.set_xlabel("Weight [volume, or the given weight]" + (" (log scale)" if log else ""))
    ax.set_ylabel("Percent bias [% of the level]")
    ax.legend(loc="upper center", bbox_to_anchor=(0.5, -0.2), ncols=3, borderaxespad=0.0)
    return what


def _pvalues(fig: Any, cols: FleetColumns) -> str:
    tests = list(cols.p_values)
    if not tests:
        ax = fig.add_subplot()
        ax.text(0.5, 0.5, "no test ran on any series", ha="center", va="center", color=MUTED)
        ax.set_xticks([])
        ax.set_yticks([])
        return "no test"
    per_row = 4
    rows = -(-len(tests) // per_row)
    axes = fig.subplots(rows, per_row, sharex=True, squeeze=False)
    edges = np.linspace(0.0, 1.0, P_BINS + 1)
    uniform = 1.0 / P_BINS
    for k, ax in enumerate(axes.flat):
        if k >= len(tests):
            ax.set_visible(False)
            continue
        name = tests[k]
        p = cols.p_values[name]
        p = p[np.isfinite(p)]
        counts, _ = np.histogram(np.clip(p, 0.0, 1.0), bins=edges)
        shares = counts / p.size
        ax.stairs(shares, edges, fill=True, color=ROLE_COLOURS["interval"], alpha=0.85)
        ax.stairs(shares, edges, color=ROLE_COLOURS["residual"], linewidth=0.8)
        ax.axhline(uniform, color=INK, linestyle="--", linewidth=1.1)
        ax.set_title(f"{_TITLE.get(name, name)} (n = {p.size:,})", fontsize=10, loc="left")
        ax.set_xlim(0.0, 1.0)
        ax.set_ylim(0.0, max(float(shares.max()) * 1.15, uniform * 2.5))
        ax.yaxis.set_major_formatter(lambda v, _pos: f"{v:.0%}")
        if k % per_row == 0:
            ax.set_ylabel("Share of series")
        if k // per_row == rows - 1 or k + per_row >= len(tests):
            ax.set_xlabel("p-value")
    width, height = fig.get_size_inches()
    fig.subplots_adjust(
        left=0.75 / width,
        right=1 - 0.15 / width,
        top=1 - 0.55 / height,
        bottom=0.55 / height,
        wspace=0.28,
        hspace=0.55 if rows > 1 else 0.2,
    )
    fig.suptitle(
        "Raw p-values of each test against the uniform share (dashed) of a sound fleet",
        x=0.01,
        y=1 - 0.08 / height,
        va="top",
        ha="left",
        fontsize=11.5,
        fontweight="bold",
    )
    return f"{len(tests)} tests"


_SPECS = {
    "grid": (
        "Status of every check by series",
        _grid,
        "Each row is a series, heaviest at the top, each column a check; the letter is the "
        "status (F fail, W warn, P pass, – skipped).",
        "Each row is a bin of series of about equal count, heaviest at the top, with its share "
        "of the fleet's weight; a cell is the share of the bin's series whose check fails "
        "(colour and number), or, marked w, the share that warns where none fails.",
    ),
    "bias": (
        "Bias against weight",
        _bias,
        "Each marker is a series: its mean error as a percentage of its level, against its "
        "weight; shape and colour give its bias check's status. Heavy series far from zero "
        "matter most; the dashed line is the fleet's weighted percent bias.",
        "Series in bins of weight: the line is the bins' median percent bias, the bands hold "
        "the middle 50% and 90% of each bin's series; squares mark the heaviest series whose "
        "bias check fails. The dashed line is the fleet's weighted percent bias.",
    ),
    "pvalues": (
        "p-values against uniform",
        _pvalues,
        "For each test, the share of the tested series whose raw p-value falls in each tenth "
        "of [0, 1]. Where the test's null hypothesis holds for every series the p-values are "
        "uniform (the dashed line); a pile at the left is evidence against it, a pile at the "
        "right a conservative test.",
        "",
    ),
}


def _size(name: str, cols: FleetColumns) -> tuple[float, float]:
    if name == "grid":
        n = cols.codes.shape[0]
        if n <= GRID_SERIES_MAX:
            return (12.8, 2.3 + 0.45 + 0.27 * max(n, 4))
        return (12.8, 2.3 + 0.27 * min(GRID_BINS, n))
    if name == "pvalues":
        rows = max(-(-len(cols.p_values) // 4), 1)
        return (12.8, 0.8 + 2.3 * rows)
    return (12.8, 4.8)


def render_fleet_chart(
    name: str, doc: AssessmentDocument, cols: FleetColumns | None = None
) -> Chart:
    """Draw fleet chart ``name`` (one of :data:`FLEET_CHART_NAMES`)."""
    if name not in _SPECS:
        raise ValueError(f"unknown chart {name!r}; expected one of {', '.join(FLEET_CHART_NAMES)}")
    cols = fleet_columns(doc) if cols is None else cols
    title, draw, few, many = _SPECS[name]
    # The grid and the p-value panels are laid out by hand (constrained layout over many
    # labels and axes costs more than drawing them).
    layout: Literal["constrained"] | None = "constrained" if name == "bias" else None
    with _figure(salt=f"fleet/{name}", size=_size(name, cols), layout=layout) as fig:
        draw(fig, cols)
        svg = _svg_text(fig, title, prefix=f"fleet-{name}-")
    aggregated = (name == "grid" and cols.codes.shape[0] > GRID_SERIES_MAX) or (
        name == "bias" and cols.codes.shape[0] > SCATTER_MAX
    )
    return Chart(
        name=name, title=title, caption=(many or few) if aggregated else few, svg=svg, wide=True
    )


def render_fleet_charts(doc: AssessmentDocument) -> tuple[Chart, ...]:
    """Every fleet chart, from one read of the document's columns."""
    cols = fleet_columns(doc)
    return tuple(render_fleet_chart(name, doc, cols) for name in FLEET_CHART_NAMES)
