"""The assessment report: HTML pages and server-side charts for a stored assessment.

Import is light: matplotlib loads only when a chart is drawn (:mod:`.charts`).
"""

from .charts import CHART_NAMES, Chart, render_chart, render_charts
from .diagnostics import SeriesDiagnostics, series_diagnostics
from .inputs import ReportInputError, SeriesInputs
from .pages import (
    CONTENT_SECURITY_POLICY,
    find_series,
    neighbours,
    render_report,
    render_series,
    series_order,
)

__all__ = [
    "CHART_NAMES",
    "CONTENT_SECURITY_POLICY",
    "Chart",
    "ReportInputError",
    "SeriesDiagnostics",
    "SeriesInputs",
    "find_series",
    "neighbours",
    "render_chart",
    "render_charts",
    "render_report",
    "render_series",
    "series_diagnostics",
    "series_order",
]
