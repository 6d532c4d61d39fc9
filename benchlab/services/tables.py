"""Plain rows for the engineer's tables (``benchlab.api`` turns them into pandas DataFrames).

Each function gathers with the same code the CLI and the report use: parts as the report's parts table
(:func:`benchlab.report.data.part_row`), sweeps through the fit command's input resolver and the session reader,
fits as ``benchlab fit --json`` prints them, designs as the library stores them.
"""

from __future__ import annotations

import os
from typing import Any, Sequence

from benchlab.report.data import part_row


def part_rows(lib, lot: str | None = None, state: str | None = None) -> list[dict[str, Any]]:
    """One row per part (``state=None``: every state) with the values the library stored: VGS at 250 uA, gm at the
    part's operating current (or the library's default) and that current."""
    return [part_row(part) for part in lib.parts(lot=lot, state=state)]


def sweep_rows(paths: Sequence[str | os.PathLike]) -> list[dict[str, Any]]:
    """Every recorded point of the sweeps found in ``paths`` (a CSV, a part's sidecar, a session folder or a folder
    of sessions), one row per point with its ``part``; session records keep every column (status, direction ...),
    a plain CSV gives the points the fitter would read."""
    from benchlab.services.fitting import resolve_inputs
    from benchlab.sweep.session import read_sweep

    rows: list[dict[str, Any]] = []
    for source in resolve_inputs(paths):
        if source.sidecar_path is not None:
            data = read_sweep(source.csv_path)
            for k in range(len(data.vgs)):
                rows.append({"part": source.label, "point": int(data.point[k]), "time_s": float(data.time_s[k]),
                             "vgs": float(data.vgs[k]), "id": float(data.id[k]), "v_source": float(data.v_source[k]),
                             "i_source": float(data.i_source[k]), "status": data.status[k],
                             "direction": data.direction[k] if k < len(data.direction) else ""})
        else:
            from benchlab.services.fitting import load_source

            sweep = load_source(source)
            rows += [{"part": source.label, "point": int(r) - 1, "vgs": float(v), "id": float(i), "direction": str(d)}
                     for r, v, i, d in zip(sweep.rows, sweep.vgs, sweep.id, sweep.direction)]
    return rows


def fit_rows(paths: Sequence[str | os.PathLike], model: str = "auto", **options: Any) -> list[dict[str, Any]]:
    """The objects ``benchlab fit --json`` prints (one per fitted input), with each standard error also as
    ``<name>_stderr``."""
    from benchlab.services.fitting import fit_files

    rows = []
    for record in fit_files(paths, model=model, **options).records:
        row = record.to_dict()
        for key, value in (row.get("stderr") or {}).items():
            row[f"{key}_stderr"] = value
        rows.append(row)
    return rows


DESIGN_FIGURES = ("mode", "supply", "i_target", "r_chosen", "series", "resistor_tolerance", "source_resistor",
                  "ref", "i_ref", "vgs", "load_voltage", "worst_error")


def design_rows(lib) -> list[dict[str, Any]]:
    """One row per recorded design: id, when, kind, its part count, and a sink's main figures (SI units)."""
    rows = []
    for summary in lib.designs():
        stored = lib.design(summary["id"])
        rows.append({"id": summary["id"], "created": summary["created"], "kind": summary["kind"],
                     "parts": summary["parts"], **{k: stored.get(k) for k in DESIGN_FIGURES},
                     "outputs": len(stored.get("outputs") or [])})
    return rows


def design_output_rows(lib, design_id: int) -> tuple[list[dict[str, Any]], dict[str, Any]]:
    """One recorded design's outputs (one row each, as ``design sink --json`` lists them) and the whole record."""
    stored = lib.design(int(design_id))
    return [dict(o) for o in stored.get("outputs") or []], stored


def thermal_rows(lib, lot: str | None = None, state: str | None = None) -> list[dict[str, Any]]:
    """One row per part with its newest measured thermal values (``benchlab thermal``), their standard errors and
    when each was measured; parts never measured have empty values (the designer's assumptions apply to them)."""
    from benchlab.library.thermal import QUANTITIES, measured_thermal

    rows = []
    with lib.snapshot():
        for part in lib.parts(lot=lot, state=state):
            measured = measured_thermal(lib, part.id)
            row: dict[str, Any] = {"lot": part.lot, "label": part.label}
            for q in QUANTITIES:
                entry = measured.get(q) or {}
                row[q] = entry.get("value")
                row[f"{q}_stderr"] = entry.get("stderr")
                row[f"{q}_measured_at"] = entry.get("measured_at")
            rows.append(row)
    return rows
