"""Report stage: PDF pages, the HTML page, figures, tables, results.json, terminal summary.

Everything here reads the results dictionary only (and the footprint files it names), so a
report can be re-rendered from a run directory without recomputing anything.
"""

from .html import render_html
from .render import build_pages, draw_page, render_report, rerender
from .results_io import (
    REQUIRED_STATISTIC_KEYS,
    REQUIRED_TOP_KEYS,
    check_results,
    load_results,
    results_to_json,
)
from .tables import statistic_table, table_name, write_statistic_tables
from .terminal import summary_table

__all__ = [
    "REQUIRED_STATISTIC_KEYS", "REQUIRED_TOP_KEYS", "build_pages", "check_results",
    "draw_page", "load_results", "render_html", "render_report", "rerender", "results_to_json",
    "statistic_table", "summary_table", "table_name", "write_statistic_tables",
]
