"""HTML + PNG report of a lot (and optionally one design) from the device library.

``build_report(data, out_dir)`` writes ``index.html`` and its PNG figures; ``collect(lib, lot, design_id)``
reads the data from the library. Figures use matplotlib's Agg renderer, no display needed.
"""

from benchlab.report.builder import ReportFiles, build_report
from benchlab.report.data import ReportData, SweepTrace, collect

__all__ = ["build_report", "ReportFiles", "ReportData", "SweepTrace", "collect"]
