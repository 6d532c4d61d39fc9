"""Service behind ``benchlab report``: read a lot (and a design) from the library and write the HTML report."""

from __future__ import annotations

import os
from pathlib import Path

from benchlab.errors import InputError, LibraryError
from benchlab.report import ReportFiles, build_report, collect
from benchlab.report.data import trace_of_sweep, vgs_at_cc
from benchlab.report.part_figures import DPI, part_fit_figure, plain_text
from benchlab.services.library import open_library


def write_report(library_path, lot: str, out_dir: str, design_id: int | None = None,
                 pdf: str | None = None) -> ReportFiles:
    """Write ``out_dir/index.html`` (self-contained) for ``lot`` (and design ``design_id``), and ``pdf`` when given."""
    if pdf is not None:  # a PDF that cannot be written is refused before the report is
        target = Path(pdf)
        if target.suffix.lower() != ".pdf" or target.is_dir() or not target.parent.is_dir():
            raise InputError("--pdf needs a .pdf file name in an existing folder", path=str(target))
    with open_library(library_path) as lib:
        data = collect(lib, lot, design_id)
    return build_report(data, out_dir, pdf=pdf)


PLOT_FORMATS = ("png", "pdf", "svg")


def check_plot_path(path: str) -> Path:
    """A figure file to write: its folder exists and its extension is a format matplotlib writes here.

    Raises
    ------
    InputError
        Checked before anything is read, fitted or written.
    """
    target = Path(path)
    if target.suffix.lower().lstrip(".") not in PLOT_FORMATS:
        raise InputError(f"--plot writes {', '.join(PLOT_FORMATS)} files; name it e.g. Q07.png", path=str(target))
    if target.is_dir():
        raise InputError("is a folder; give a file name", path=str(target))
    if not target.parent.is_dir():
        raise InputError("its folder does not exist", path=str(target))
    return target


def save_figure(fig, target: Path) -> str:
    """Write ``fig`` to ``target`` atomically (temp file + rename); the format follows the extension."""
    tmp = target.with_name(target.name + ".tmp")
    try:
        plain_text(fig)
        fig.savefig(tmp, format=target.suffix.lower().lstrip("."), dpi=DPI, bbox_inches="tight")
        os.replace(tmp, target)
    except OSError as exc:
        raise InputError(f"cannot write: {exc.strerror or exc}", path=str(target)) from exc
    return str(target)


def plot_part(library_path, spec: str, out: str) -> str:
    """``benchlab parts show PART --plot FILE``: the part's latest stored sweep, its curve, thresholds, residuals."""
    target = check_plot_path(out)
    with open_library(library_path) as lib:
        part = lib.get_part(spec)
        traces = [t for t in (trace_of_sweep(part, s) for s in lib.sweeps(part)) if t is not None]
        window = lib.fit_window(part.fit_id) if part.fit_id is not None else None
    trace = traces[-1] if traces else None
    if trace is None and part.params is None:
        raise LibraryError(f"part '{part.spec}' has neither a sweep nor a curve: nothing to plot")
    fig = part_fit_figure(part.spec, trace.vgs if trace else (), trace.id if trace else (), part.params,
                          vgs_at_cc=vgs_at_cc(trace), window=window,
                          title=f"{part.spec} ({part.state}): stored sweep and curve" if trace else
                          f"{part.spec} ({part.state}): hand-entered curve, no sweep")
    return save_figure(fig, target)


def plot_fits(records, out: str) -> list[str]:
    """``benchlab fit FILE --plot OUT``: each fitted sweep's points (those the fitter read), its curve, every
    threshold the fit found and the residuals. One sweep goes to ``OUT``; several to ``OUT-stem-LABEL.ext``."""
    from benchlab.services.fitting import load_source

    target = check_plot_path(out)
    written = []
    for record in records:
        path = target if len(records) == 1 else target.with_name(f"{target.stem}-{record.source.label}{target.suffix}")
        sweep = load_source(record.source)
        result = record.result
        fig = part_fit_figure(record.source.label, sweep.vgs, sweep.id, result.params, vgs_at_cc=result.vth_cc,
                              cc_current=result.cc_current, thresholds=result.thresholds,
                              window=(result.window["i_min"], result.window["i_max"]) if result.window else None,
                              title=f"{record.source.label}: {result.model} fit of {record.source.csv_path.name}")
        written.append(save_figure(fig, path))
    return written
