"""Reports: the run's evidence pack as one self-contained HTML page, and the comparison of
two runs. Both are derived views built from the runs' files."""

from __future__ import annotations

from pqflow.report.compare import Comparison, compare_runs, comparison_json, summary_lines, write_compare_html
from pqflow.report.html import build_report_html, write_report

__all__ = [
    "Comparison",
    "build_report_html",
    "compare_runs",
    "comparison_json",
    "summary_lines",
    "write_compare_html",
    "write_report",
]
