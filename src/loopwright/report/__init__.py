"""The design report: ``index.html`` with figures and tables, PNG/SVG plots, ``summary.json``.

Use :func:`write_report` (or ``loopwright report FILE``).
"""

from __future__ import annotations

from .builder import CAUTION, build_report, render_report, write_report

__all__ = ["CAUTION", "build_report", "render_report", "write_report"]
