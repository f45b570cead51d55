"""Self-contained HTML reports of runs, results, comparisons and studies.

``build_report(path)`` and ``build_comparison_report(paths)`` write one HTML file: images
embedded as data URIs, the style sheet inline, no script and nothing fetched. Mode pictures
need offscreen OpenGL (pyvista; only :mod:`bridge.report.render` imports it).
"""

from __future__ import annotations

from .build import (DEFAULT_MAX_MODES, ReportError, build_comparison_report, build_report, collect,
                    collect_comparison, draw, report_for_results, write_report)
from .html import CAUTION, render_page

__all__ = ["build_report", "build_comparison_report", "collect", "collect_comparison", "report_for_results",
           "draw", "write_report", "render_page", "ReportError", "CAUTION", "DEFAULT_MAX_MODES"]
