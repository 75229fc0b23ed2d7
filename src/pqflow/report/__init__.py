"""Reports: the run's evidence pack as one self-contained HTML page, and the comparison of
two runs. Both are derived views built from the runs' files.

The names below are loaded on first use, so that ``pqflow.report.numbers`` (the formatting
rule every command uses) can be imported without pandas and the page builders.
"""

from __future__ import annotations

from typing import Any

__all__ = [
    "Comparison",
    "build_report_html",
    "compare_runs",
    "comparison_json",
    "summary_lines",
    "write_compare_html",
    "write_report",
]

_WHERE = {
    "Comparison": "compare", "compare_runs": "compare", "comparison_json": "compare",
    "summary_lines": "compare", "write_compare_html": "compare",
    "build_report_html": "html", "write_report": "html",
}


def __getattr__(name: str) -> Any:
    if name in _WHERE:
        import importlib

        return getattr(importlib.import_module(f"pqflow.report.{_WHERE[name]}"), name)
    raise AttributeError(f"module 'pqflow.report' has no attribute {name!r}")
