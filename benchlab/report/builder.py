"""Write a report folder: figures first, then index.html naming them."""

from __future__ import annotations

import os
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from benchlab.errors import InputError
from benchlab.models import DeviceParams, solve_resistor_line
from benchlab.report import figures
from benchlab.report.data import ReportData
from benchlab.report.html_page import cautions_section, design_section, page, parts_table
from benchlab.library.records import utc_now


@dataclass(frozen=True)
class ReportFiles:
    """What a report run wrote."""

    folder: str
    index: str
    figures: tuple[str, ...]
    operating_point: dict | None = None  # the reference part's crossing with the resistor line, solved here

    def to_dict(self) -> dict[str, Any]:
        return {"folder": self.folder, "index": self.index, "figures": list(self.figures),
                "operating_point": self.operating_point}


def _number(design: dict, *keys: str) -> float | None:
    for key in keys:
        value = design.get(key)
        if isinstance(value, (int, float)) and not isinstance(value, bool):
            return float(value)
    return None


def build_report(data: ReportData, out_dir: str | os.PathLike) -> ReportFiles:
    """Write ``index.html`` and its PNG figures into ``out_dir`` (created when missing).

    Parameters
    ----------
    data : ReportData
        From :func:`benchlab.report.collect`.
    out_dir : path-like
        The report folder; existing report files in it are replaced.

    Returns
    -------
    ReportFiles
    """
    folder = Path(out_dir)
    if folder.exists() and not folder.is_dir():
        raise InputError("exists and is not a folder", path=str(folder))
    folder.mkdir(parents=True, exist_ok=True)
    names: dict[str, str] = {}
    operating_point = None

    def emit(key: str, fig) -> None:
        name = f"{key}.png"
        figures.save(fig, folder / name)
        names[key] = name

    emit("sweeps", figures.sweeps_figure(data.traces, f"Lot {data.lot}: {len(data.traces)} sweep(s)"))
    emit("histograms", figures.histograms_figure([p for p in data.parts if p.state != "rejected"]))
    emit("kp_vs_vth", figures.scatter_figure([p for p in data.parts if p.state != "rejected"], data.design_sets))
    design = data.design
    if design is not None and data.reference is not None and data.reference.params is not None:
        supply = _number(design, "supply", "supply_v")
        resistor = _number(design, "r_chosen", "resistor", "r_exact")
        if supply and resistor and supply > 0 and resistor > 0:
            params: DeviceParams = data.reference.params
            source_resistor = _number(design, "source_resistor") or 0.0
            vgs_solved, id_solved = solve_resistor_line(params, supply, resistor, source_resistor)
            operating_point = {"part": data.reference.spec, "supply": supply, "resistor": resistor,
                               "source_resistor": source_resistor, "vgs": vgs_solved, "id": id_solved}
            emit("operating_point", figures.operating_point_figure(
                params, data.reference.label, supply, resistor, _number(design, "vgs"),
                _number(design, "i_ref", "current"), source_resistor))
    chosen = {label for s in data.design_sets for label in s}
    body = [
        "<h2>Sweeps</h2>", f'<img src="{names["sweeps"]}" alt="all sweeps, drain current on a log axis">',
        "<h2>Spread of the lot</h2>", f'<img src="{names["histograms"]}" alt="histograms of threshold and KP">',
        f'<img src="{names["kp_vs_vth"]}" alt="KP against threshold, chosen sets marked">',
    ]
    if design is not None:
        body.append(design_section(design, names))
    body += ["<h2>Parts</h2>", parts_table(data.parts, chosen)]
    body.append(cautions_section([str(c) for c in (design or {}).get("cautions", []) or []]))
    counts = {s: sum(1 for p in data.parts if p.state == s) for s in ("in_stock", "reserved", "used", "rejected")}
    meta = (f"{len(data.parts)} part(s): " + ", ".join(f"{n} {s}" for s, n in counts.items() if n)
            + f". Library {data.library_path}. Written {utc_now()}.")
    title = f"benchlab report: lot {data.lot}" + (f", design {design.get('design_id')}" if design else "")
    index = folder / "index.html"
    tmp = folder / "index.html.tmp"
    tmp.write_text(page(title, meta, body), encoding="utf-8")
    os.replace(tmp, index)
    return ReportFiles(folder=str(folder), index=str(index), figures=tuple(str(folder / n) for n in names.values()),
                       operating_point=operating_point)

