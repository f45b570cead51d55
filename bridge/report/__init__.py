"""Self-contained HTML reports of runs, results, comparisons and studies.

``build_report(path)`` and ``build_comparison_report(paths)`` write one HTML file: images
embedded as data URIs, the style sheet inline, no script and nothing fetched. Mode pictures
need offscreen OpenGL (VTK; only :mod:`bridge.report.render` draws in 3D).

The names below are imported on first use: a drawing process started by a report imports
:mod:`bridge.report.render` alone, not the builder (which brings the model schema: 0.5 s of
imports, measured with ``python -X importtime``).
"""

from __future__ import annotations

import importlib

__all__ = ["build_report", "build_comparison_report", "collect", "collect_comparison", "report_for_results",
           "draw", "write_report", "render_page", "ReportError", "CAUTION", "DEFAULT_MAX_MODES"]

_WHERE = {"render_page": ".html", "CAUTION": ".html"}


def __getattr__(name: str):
    if name not in __all__:
        raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
    value = getattr(importlib.import_module(_WHERE.get(name, ".build"), __name__), name)
    globals()[name] = value
    return value


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(__all__))
