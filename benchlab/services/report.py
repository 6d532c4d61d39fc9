"""Service behind ``benchlab report``: read a lot (and a design) from the library and write the HTML report."""

from __future__ import annotations

from benchlab.report import ReportFiles, build_report, collect
from benchlab.services.library import open_library


def write_report(library_path, lot: str, out_dir: str, design_id: int | None = None,
                 pdf: str | None = None) -> ReportFiles:
    """Write ``out_dir/index.html`` (self-contained) for ``lot`` (and design ``design_id``), and ``pdf`` when given."""
    with open_library(library_path) as lib:
        data = collect(lib, lot, design_id)
    return build_report(data, out_dir, pdf=pdf)
