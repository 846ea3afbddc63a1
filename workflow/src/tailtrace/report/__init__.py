"""The end-of-day report: one self-contained HTML page and a headline CSV.

Typical use::

    from tailtrace.report import ReportOptions, build_report
    build_report("results/risk.duckdb", "2024-06-28", out_html="r.html", out_csv="r.csv",
                 options=ReportOptions(base_currency="EUR", headline_method="historical"),
                 limits_csv="config/limits.csv")
"""

from __future__ import annotations

from tailtrace.report.build import ReportResult, build_report, headline_csv_text
from tailtrace.report.content import ReportContent, collect_report
from tailtrace.report.limits import limit_utilisation, read_limits
from tailtrace.report.options import ReportOptions
from tailtrace.report.render import render_html

__all__ = [
    "ReportOptions",
    "ReportContent",
    "ReportResult",
    "build_report",
    "collect_report",
    "headline_csv_text",
    "limit_utilisation",
    "read_limits",
    "render_html",
]
