"""Series charts drawn with matplotlib on its SVG canvas, returned as inline SVG text.

No pyplot and no interactive backend: each chart is a bare ``Figure`` saved as SVG.

matplotlib is imported inside the functions, never at module import, so loading the service
(and running assessments) does not pay for it: only rendering a series page does.
"""

from __future__ import annotations

import io
import re
import threading
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from dataclasses import dataclass
from html import escape
from typing import Any, Literal

import numpy as np

from .diagnostics import SeriesDiagnostics
from .style import CHART_RC, FIGURE_SIZE, GRID, ROLE_COLOURS, WIDE_FIGURE_SIZE

CHART_NAMES = ("residuals", "acf", "histogram", "fitted", "holdout")
WIDE_CHARTS = frozenset({"holdout"})
MAX_BINS = 40
MARKERS_UP_TO = 150
"""The residual chart marks each period up to this many residuals; beyond, a thin line."""
SHADE_ALPHA = 0.22
"""Opacity of the shaded spans (the tracking-signal window, the tested lags)."""

# rcParams are process-wide: one chart at a time keeps concurrent requests from mixing styles.
_RENDER_LOCK = threading.Lock()
_SVG_START = re.compile(r"<svg\b")
_ID_REFS = re.compile(r'(\bid="|url\(#|href="#)([^")]+)')


@dataclass(frozen=True)
class Chart:
    """One rendered chart: ``svg`` is an ``<svg>`` element ready to inline in HTML; ``wide``
    charts span the page's width."""

    name: str
    title: str
    caption: str
    svg: str
    wide: bool = False


@contextmanager
def _figure(
    salt: str, size: tuple[float, float], layout: Literal["constrained"] | None = "constrained"
) -> Iterator[Any]:
    import matplotlib
    from matplotlib.backends.backend_svg import FigureCanvasSVG
    from matplotlib.figure import Figure

    rc: dict[Any, Any] = {**CHART_RC, "svg.hashsalt": salt}
    with _RENDER_LOCK, matplotlib.rc_context(rc):
        fig = Figure(figsize=size, layout=layout)
        FigureCanvasSVG(fig)
        yield fig


def _svg_text(fig: Any, label: str, prefix: str) -> str:
    """The figure as an ``<svg>`` element; every id (and reference to one) gets ``prefix``
    so several charts can share one HTML document without clashing ids."""
    buf = io.StringIO()
    fig.savefig(buf, format="svg", metadata={"Date": None})
    text = buf.getvalue()
    match = _SVG_START.search(text)
    if match is None:  # pragma: no cover - matplotlib always writes an svg element
        raise RuntimeError("matplotlib produced no <svg> element")
    svg = _ID_REFS.sub(lambda m: f"{m.group(1)}{prefix}{m.group(2)}", text[match.start() :])
    return svg.replace("<svg", f'<svg role="img" aria-label="{escape(label, quote=True)}"', 1)


def _empty(ax: Any, message: str) -> None:
    ax.text(
        0.5,
        0.5,
        message,
        transform=ax.transAxes,
        ha="center",
        va="center",
        color=ROLE_COLOURS["reference"],
    )
    ax.set_xticks([])
    ax.set_yticks([])


def _date_axis(ax: Any, is_date: bool) -> None:
    if is_date:
        import matplotlib.dates as mdates

        locator = mdates.AutoDateLocator(minticks=4, maxticks=9)
        ax.xaxis.set_major_locator(locator)
        ax.xaxis.set_major_formatter(mdates.ConciseDateFormatter(locator))


def _legend(ax: Any) -> None:
    """Legend below the axes, so it never hides data."""
    ax.legend(loc="upper center", bbox_to_anchor=(0.5, -0.2), ncols=2, borderaxespad=0.0)


def _zero_line(ax: Any) -> None:
    ax.axhline(0.0, color=ROLE_COLOURS["reference"], linewidth=1.0, zorder=1)


def isolated(values: np.ndarray) -> np.ndarray:
    """The observed values with no observed neighbour: a line through them draws nothing."""
    ok = ~np.isnan(values)
    before = np.concatenate(([False], ok[:-1]))
    after = np.concatenate((ok[1:], [False]))
    return ok & ~before & ~after


def _residuals(ax: Any, d: SeriesDiagnostics) -> None:
    ok = ~np.isnan(d.residuals)
    if not ok.any():
        _empty(ax, "no residuals: no period has both an actual and a fitted value")
        return
    x = d.axis.train
    if d.tracking_window and ok.sum() >= 1:
        last = np.flatnonzero(ok)[-d.tracking_window :]
        ax.axvspan(
            x[last[0]],
            x[last[-1]],
            color=ROLE_COLOURS["highlight"],
            alpha=SHADE_ALPHA,
            linewidth=0,
            label=f"last {len(last)} residuals (tracking-signal window)",
        )
        ax.axvline(x[last[0]], color=ROLE_COLOURS["highlight"], linewidth=1.0, zorder=1)
    _zero_line(ax)
    residual = ROLE_COLOURS["residual"]
    n = int(ok.sum())
    if n <= MARKERS_UP_TO:
        ax.plot(x, d.residuals, color=residual, marker="o", markersize=2.4, label="residual")
    else:
        # Many periods: a thin line (markers would merge into a band); a lone value between
        # gaps still gets its dot.
        width = 1.0 if n <= 400 else 0.7
        ax.plot(x, d.residuals, color=residual, linewidth=width, label="residual")
        alone = isolated(d.residuals)
        if alone.any():
            ax.plot(x[alone], d.residuals[alone], "o", color=residual, markersize=2.0)
    ax.axhline(
        d.mean,
        color=ROLE_COLOURS["fit"],
        linestyle="--",
        linewidth=1.6,
        zorder=3,
        label=f"mean residual {d.mean:+.3g}",
    )
    ax.set_xlabel(d.axis.label)
    ax.set_ylabel("Residual (actual − fitted)\n[series units]")
    _date_axis(ax, d.axis.is_date)
    _legend(ax)


def _acf(ax: Any, d: SeriesDiagnostics) -> None:
    if d.acf.size == 0:
        _empty(ax, "autocorrelation undefined: too few or constant residuals")
        return
    lags = np.arange(1, d.acf.size + 1)
    if d.ljung_box_lags:
        ax.axvspan(
            0.5,
            d.ljung_box_lags + 0.5,
            color=ROLE_COLOURS["highlight"],
            alpha=SHADE_ALPHA,
            linewidth=0,
            label=f"lags 1–{d.ljung_box_lags} tested for autocorrelation",
        )
    b = d.acf_bound
    ax.axhspan(-b, b, color=GRID, alpha=0.6, linewidth=0)
    ax.axhline(
        b,
        color=ROLE_COLOURS["reference"],
        linestyle="--",
        linewidth=1.0,
        label=f"±1.96/√T = ±{b:.3g} (T = {d.n_obs})",
    )
    ax.axhline(-b, color=ROLE_COLOURS["reference"], linestyle="--", linewidth=1.0)
    _zero_line(ax)
    outside = np.abs(d.acf) > b
    ax.vlines(lags, 0, d.acf, color=ROLE_COLOURS["residual"], linewidth=1.6)
    ax.plot(
        lags[~outside],
        d.acf[~outside],
        "o",
        color=ROLE_COLOURS["residual"],
        markersize=3.5,
        label="autocorrelation",
    )
    if outside.any():
        ax.plot(
            lags[outside],
            d.acf[outside],
            "D",
            color=ROLE_COLOURS["forecast"],
            markersize=4.5,
            label="outside the bounds",
        )
    from matplotlib.ticker import MaxNLocator

    ax.xaxis.set_major_locator(MaxNLocator(integer=True))
    ax.set_xlim(0.3, d.acf.size + 0.7)
    top = max(float(np.nanmax(np.abs(d.acf))), b) * 1.25
    ax.set_ylim(-top, top)
    ax.set_xlabel("Lag [periods]")
    ax.set_ylabel("Autocorrelation")
    _legend(ax)


def _histogram(ax: Any, d: SeriesDiagnostics) -> None:
    e = d.residuals[~np.isnan(d.residuals)]
    if e.size < 2 or not d.std > 0:
        _empty(ax, "distribution undefined: fewer than two distinct residuals")
        return
    edges = np.histogram_bin_edges(e, bins="auto")
    if edges.size - 1 > MAX_BINS:
        edges = np.histogram_bin_edges(e, bins=MAX_BINS)
    ax.hist(
        e,
        bins=edges,
        density=True,
        color=ROLE_COLOURS["interval"],
        alpha=0.75,
        edgecolor="white",
        linewidth=0.6,
        label=f"residuals (n = {e.size})",
    )
    span = np.linspace(min(edges[0], d.mean - 4 * d.std), max(edges[-1], d.mean + 4 * d.std), 200)
    pdf = np.exp(-0.5 * ((span - d.mean) / d.std) ** 2) / (d.std * np.sqrt(2 * np.pi))
    ax.plot(
        span,
        pdf,
        color=ROLE_COLOURS["fit"],
        linewidth=2.0,
        label=f"normal, mean {d.mean:.3g}, sd {d.std:.3g}",
    )
    ax.axvline(0.0, color=ROLE_COLOURS["reference"], linewidth=1.0)
    ax.set_xlabel("Residual [series units]")
    ax.set_ylabel("Density [1 / series unit]")
    _legend(ax)


def _fitted(ax: Any, d: SeriesDiagnostics) -> None:
    ok = ~np.isnan(d.residuals) & ~np.isnan(d.fitted)
    if not ok.any():
        _empty(ax, "no residuals to draw")
        return
    _zero_line(ax)
    ax.scatter(
        d.fitted[ok],
        d.residuals[ok],
        s=12,
        color=ROLE_COLOURS["residual"],
        alpha=0.75,
        edgecolors="none",
        label="one period",
    )
    ax.set_xlabel("Fitted value [series units]")
    ax.set_ylabel("Residual [series units]")
    _legend(ax)


def _holdout(ax: Any, d: SeriesDiagnostics) -> None:
    h = d.holdout
    if h is None:
        _empty(ax, "no holdout was submitted for this series")
        return
    x_train = d.axis.train[h.context_start :]
    x_hold = d.axis.holdout
    ax.plot(
        x_train,
        d.actuals[h.context_start :],
        color=ROLE_COLOURS["actual"],
        linewidth=1.1,
        alpha=0.55,
        label="training actuals",
    )
    if h.lower is not None and h.upper is not None:
        level = f"{h.level:.0%} " if h.level else ""
        ax.fill_between(
            x_hold,
            h.lower,
            h.upper,
            color=ROLE_COLOURS["interval"],
            alpha=0.35,
            linewidth=0,
            label=f"{level}prediction interval",
        )
    ax.plot(
        x_hold,
        h.actuals,
        color=ROLE_COLOURS["actual"],
        marker="o",
        markersize=3.0,
        label="holdout actuals",
    )
    ax.plot(
        x_hold,
        h.forecasts,
        color=ROLE_COLOURS["forecast"],
        marker="s",
        markersize=3.0,
        label="model forecast",
    )
    if h.baseline_forecasts is not None:
        ax.plot(
            x_hold,
            h.baseline_forecasts[: x_hold.size],
            color=ROLE_COLOURS["highlight"],
            marker="^",
            markersize=3.0,
            linestyle="-.",
            linewidth=1.4,
            label="baseline forecast"
            + ("" if not h.baseline_label else f": version {h.baseline_label}"),
        )
    if h.benchmark is not None and h.benchmark_forecasts is not None:
        ax.plot(
            x_hold,
            h.benchmark_forecasts,
            color=ROLE_COLOURS["benchmark"],
            linestyle="--",
            linewidth=1.6,
            label=f"best benchmark: {h.benchmark.replace('_', ' ')}",
        )
    if x_train.size:
        ax.axvline(x_train[-1], color=ROLE_COLOURS["reference"], linestyle=":", linewidth=1.0)
    ax.set_xlabel(d.axis.label)
    ax.set_ylabel("Value [series units]")
    _date_axis(ax, d.axis.is_date)
    _legend(ax)


_Draw = Callable[[Any, SeriesDiagnostics], None]
_Caption = Callable[[SeriesDiagnostics], str]
_SPECS: dict[str, tuple[str, _Draw, _Caption]] = {
    "residuals": (
        "Residuals over time",
        _residuals,
        lambda d: (
            "Actual minus fitted value per period, with the zero line and the mean residual "
            "(dashed). Runs on one side of zero point to bias; a spread that changes over time "
            "points to unstable variance"
            + (
                f"; shaded: the last {d.tracking_window} residuals, the tracking signal's window."
                if d.tracking_window
                else "."
            )
        ),
    ),
    "acf": (
        "Residual autocorrelation",
        _acf,
        lambda d: (
            "Sample autocorrelation of the residuals by lag, with the approximate 95% "
            f"bounds ±1.96/√T for white noise (T = {d.n_obs} residuals)"
            + (
                f"; shaded: lags 1–{d.ljung_box_lags}, the short lags the autocorrelation check "
                "tests (from 30 residuals lag 1 by the lag-1 regression, the others by the "
                "portmanteau; the seasonal lags apart)."
                if d.ljung_box_lags
                else "."
            )
        ),
    ),
    "histogram": (
        "Residual distribution",
        _histogram,
        lambda d: (
            "Histogram of the residuals (as a density) with the normal density of the "
            "same mean and standard deviation. Heavy tails or skew show as departures "
            "from the curve."
        ),
    ),
    "fitted": (
        "Residuals against fitted values",
        _fitted,
        lambda d: (
            "Each dot is one period. A spread that widens as the fitted level grows "
            "suggests errors proportional to the level (a log or multiplicative model "
            "may fit better)."
        ),
    ),
    "holdout": (
        "Holdout: actuals against forecasts",
        _holdout,
        lambda d: (
            "The out-of-sample period after the dotted line: actuals, the model's "
            "forecasts, its prediction interval and the forecast of the best simple benchmark "
            "fitted to the same training actuals"
            + (
                "; dash-dot: the baseline version's forecasts on the matched periods."
                if d.holdout is not None and d.holdout.baseline_forecasts is not None
                else "."
            )
        ),
    ),
}


def render_chart(name: str, diag: SeriesDiagnostics) -> Chart:
    """Draw chart ``name`` (one of :data:`CHART_NAMES`) for one series."""
    if name not in _SPECS:
        raise ValueError(f"unknown chart {name!r}; expected one of {', '.join(CHART_NAMES)}")
    title, draw, caption = _SPECS[name]
    size = WIDE_FIGURE_SIZE if name in WIDE_CHARTS else FIGURE_SIZE
    with _figure(salt=f"{diag.series_id}/{name}", size=size) as fig:
        ax = fig.add_subplot()
        ax.set_title(title)
        draw(ax, diag)
        svg = _svg_text(fig, title, prefix=f"chart-{name}-")
    return Chart(name=name, title=title, caption=caption(diag), svg=svg, wide=name in WIDE_CHARTS)


def render_charts(diag: SeriesDiagnostics) -> tuple[Chart, ...]:
    """Every chart for one series; the holdout chart only when it has a holdout."""
    names = [n for n in CHART_NAMES if n != "holdout" or diag.holdout is not None]
    return tuple(render_chart(n, diag) for n in names)
