"""The survey report: one self-contained HTML page composed from the analyses.

Modules: :mod:`~analysis.report.build` (compose the analyses, each computed once),
:mod:`~analysis.report.html` (render), :mod:`~analysis.report.plots` (figures).
"""

from analysis.report.build import Report, build_report
from analysis.report.html import render_html, write_report

__all__ = ["Report", "build_report", "render_html", "write_report"]
