"""Write the report: one self-contained HTML file (figures embedded as base64 PNG), optionally a PDF."""

from __future__ import annotations

import os
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from benchlab import __version__
from benchlab.design.montecarlo import monte_carlo_currents
from benchlab.design.parts import Part
from benchlab.design.text import worst_error
from benchlab.units import format_si
from benchlab.errors import InputError
from benchlab.library.records import utc_now
from benchlab.models import DeviceParams, solve_resistor_line
from benchlab.report import figures, html_page as hp
from benchlab.report.data import ReportData, lot_statistics, part_row
from benchlab.report.part_figures import monte_carlo_figure, outputs_figure, part_fit_figure
from benchlab.report.schematic import sink_schematic


@dataclass(frozen=True)
class ReportFiles:
    """What a report run wrote: the HTML file (and PDF), the captions of the figures embedded in it."""

    folder: str
    index: str
    figures: tuple[str, ...]  # the captions, in page order
    operating_point: dict | None = None  # the reference part's crossing with the resistor line, solved here
    pdf: str | None = None
    verdict: str | None = None

    def to_dict(self) -> dict[str, Any]:
        return {"folder": self.folder, "index": self.index, "figures": list(self.figures),
                "operating_point": self.operating_point, "pdf": self.pdf, "verdict": self.verdict}


@dataclass
class _Figures:
    """Figures in page order: each rendered to PNG at once (and kept for the PDF when one is asked for)."""

    keep: bool
    items: list = field(default_factory=list)  # (figure or None, caption)

    def add(self, fig, caption: str, alt: str) -> str:
        html = hp.figure_html(figures.png_bytes(fig), len(self.items) + 1, caption, alt)
        self.items.append((fig if self.keep else None, caption))
        return html


def _number(design: dict, *keys: str) -> float | None:
    for key in keys:
        value = design.get(key)
        if isinstance(value, (int, float)) and not isinstance(value, bool):
            return float(value)
    return None


def monte_carlo_errors(design: dict) -> tuple[dict[str, np.ndarray], bool]:
    """Each output's error draws of the design's Monte Carlo, drawn again from its stored parts and seed.

    Returns the draws by output name and whether their statistics agree with the ones stored with the design
    (they do unless the Monte Carlo code changed since it was recorded).
    """
    mc = design.get("monte_carlo") or {}
    stored = design.get("parts") or []
    if not mc or len(stored) != 1 + len(design.get("outputs") or []):
        return {}, False
    parts = [Part.from_dict(p) for p in stored]
    i_ref, i_outs = monte_carlo_currents(design["supply"], design["r_chosen"], parts[0], parts[1:],
                                         samples=int(mc["samples"]), seed=int(mc["seed"]),
                                         resistor_tolerance=float(mc["resistor_tolerance"]),
                                         source_resistor_ohm=float(design.get("source_resistor") or 0.0))
    errors = {str(o["part"]).rsplit("/", 1)[-1]: i_out / i_ref - 1.0 for o, i_out in zip(design["outputs"], i_outs)}
    recorded = [o["error"]["mean"] for o in mc.get("outputs") or []]
    agree = len(recorded) == len(errors) and bool(np.allclose([e.mean() for e in errors.values()], recorded,
                                                              rtol=1e-9, atol=1e-12))
    return errors, agree


def _monte_carlo_sentence(design: dict, errors: dict[str, np.ndarray], target: float | None) -> str:
    mc = design.get("monte_carlo") or {}
    if not mc or not errors:
        return "No Monte Carlo run was recorded with the design (design sink --monte-carlo N)."
    draws = np.vstack(list(errors.values()))
    worst = float(np.max(np.percentile(np.abs(draws), 97.5, axis=1)))  # the designer's worst_error_p97_5
    text = (f"Monte Carlo over resistor tolerance and fit uncertainty ({mc['samples']} draws): each output's error "
            f"stays within {worst * 100:.2f} % in 97.5 % of the draws (worst output)")
    if target:
        inside = float(np.mean(np.all(np.abs(draws) <= target, axis=0))) * 100
        text += f"; every output within the {target * 100:g} % target in {inside:.1f} % of the draws"
    return text + "."


def _summary(data: ReportData, design: dict | None, stats: dict,
             errors: dict[str, np.ndarray]) -> tuple[str, str | None]:
    if design is None or "r_chosen" not in design or not isinstance(design.get("outputs"), list):
        text = (f"Lot {data.lot}: {stats['parts']} part(s), {stats['good']} good (yield "
                f"{hp.num(stats['yield'], '.1f', 100.0)} %). "
                + ("No design is part of this report (benchlab report --design ID adds one)." if design is None
                   else f"Design {design.get('design_id')} is a {design.get('kind') or 'recorded'} design, not a current "
                        f"sink" + (f": a matched set with worst error {hp.num(design['set'].get('worst_error'), '.3f', 100.0)} %"
                                   if isinstance(design.get("set"), dict) else "") + "; its parts are marked below."))
        return f'<h2>Summary</h2><div class="summary"><p>{hp.esc(text)}</p></div>', None
    ok, sentence = hp.verdict(design)
    outputs = design.get("outputs") or []
    what = (f"A current sink of one reference and {len(outputs)} output(s) from a {format_si(design['supply'], 'V', 4)} "
            f"supply" + (f" for {format_si(design['i_target'], 'A', 4)} per output" if design.get("i_target") else "")
            + f": design {design.get('design_id')}, recorded {design.get('recorded_at')}, parts of lot {data.lot}.")
    body = [f"<p>{hp.esc(what)}</p>",
            f'<p class="verdict {"meets" if ok else "misses"}">{hp.esc(sentence)}</p>',
            f"<p>Worst output error {worst_error(design) * 100:.3f} %; reference current "
            f"{hp.esc(format_si(design['i_ref'], 'A', 4))}.</p>",
            f"<p>{hp.esc(_monte_carlo_sentence(design, errors, (design.get('degeneration') or {}).get('target')))}</p>",
            hp.table(("resistor", "count", "value", "series, tolerance", "dissipation", "buy rated at least"),
                     hp.shopping_rows(design), caption="Resistors to buy (rating: twice the dissipation or more, "
                                                       "common practice)", text_columns=4)]
    cautions = [str(c) for c in design.get("cautions") or []]
    body.append('<div class="caution"><strong>Cautions</strong><ul>' + "".join(f"<li>{hp.esc(c)}</li>" for c in cautions)
                + "</ul></div>")
    return '<h2>Summary</h2><div class="summary">' + "\n".join(body) + "</div>", sentence


def _part_figures(data: ReportData, figs: _Figures, chosen: list[str], vgs_cc: dict) -> list[str]:
    out = []
    by_label = {p.label: p for p in data.parts}
    for label in chosen:
        part, trace = by_label.get(label), data.trace_of(label)
        if part is None:
            continue
        role = "reference" if data.design_sets and label == data.design_sets[0][0] else "output"
        model = part.params.model if part.params else "missing"
        out.append(figs.add(part_fit_figure(part.spec, trace.vgs if trace else (), trace.id if trace else (),
                                            part.params, vgs_at_cc=vgs_cc.get(label),
                                            window=data.windows.get(label)),
                            f"{part.spec} ({role}): measured points and the {model} fit on a log current axis, the "
                            f"fitted threshold (dashed) and VGS at 250 uA from the data (square); points outside the "
                            f"fitted window hollow; below, the residuals (measured / fit - 1).", f"curve and fit of {part.label}"))
        thermal = _thermal_figure(data, part)
        if thermal is not None:
            out.append(figs.add(*thermal))
    return out


def _thermal_figure(data: ReportData, part) -> tuple | None:
    """ID at 25 and 75 degC with the ZTC point marked, from the design's thermal values of this part."""
    entries = {t.get("part"): t for t in (data.design or {}).get("thermal") or []}
    entry = entries.get(part.spec) or entries.get(part.label)
    if entry is None or part.params is None or not any(str(v).startswith("measured")
                                                        for v in (entry.get("sources") or {}).values()):
        return None  # only parts measured with benchlab thermal get the figure
    from benchlab.design.part_thermal import ThermalValues, id_at_two_temperatures
    from benchlab.report.part_figures import new_figure
    from benchlab.report.thermal_figure import plot_id_two_temperatures

    values = ThermalValues(**{k: entry[k] for k in ThermalValues.__dataclass_fields__})
    curves = id_at_two_temperatures(part.params, values, 298.15, 348.15)
    fig = new_figure(7.0, 3.5)
    plot_id_two_temperatures(fig.add_subplot(1, 1, 1), curves, part.spec)
    where = (f"the curves cross at the ZTC point, {curves['ztc_vgs']:.2f} V (marked)" if curves["ztc_vgs"]
             else "no ZTC point in this range")
    return (fig, f"{part.spec}: ID against VGS at 25 and 75 degC with its own coefficients "
                 f"(threshold: {values.sources.get('vth_tempco')}; mobility: {values.sources.get('kp_exponent')}); "
                 f"{where}. Below it a hotter part conducts more.", f"ID at two temperatures of {part.label}")


def build_report(data: ReportData, out_dir: str | os.PathLike, *, pdf: str | os.PathLike | None = None) -> ReportFiles:
    """Write ``index.html`` (self-contained) into ``out_dir`` (created when missing), and the PDF when asked.

    Parameters
    ----------
    data : ReportData
        From :func:`benchlab.report.collect`.
    out_dir : path-like
        The report folder; an existing ``index.html`` in it is replaced.
    pdf : path-like, optional
        Also write the summary and every figure with its caption to this PDF (matplotlib's PDF backend).

    Returns
    -------
    ReportFiles
    """
    folder = Path(out_dir)
    if folder.exists() and not folder.is_dir():
        raise InputError("exists and is not a folder", path=str(folder))
    folder.mkdir(parents=True, exist_ok=True)
    figs = _Figures(keep=pdf is not None)
    design = data.design
    chosen = [label for s in data.design_sets for label in s]
    vgs_cc = {p.label: data.vgs_at_cc(p.label) for p in data.parts}  # measured, for the figures' data marker
    stats = lot_statistics(data.parts, {p.label: p.vgs_ref for p in data.parts})  # the stored values
    operating_point = None
    is_sink = design is not None and isinstance(design.get("outputs"), list) and "r_chosen" in design
    errors, agree = monte_carlo_errors(design) if is_sink else ({}, False)
    summary, sentence = _summary(data, design, stats, errors)
    body = [summary]
    if is_sink:
        target = (design.get("degeneration") or {}).get("target")
        body.append("<h2>The design</h2>")
        if "ref" in design and design.get("outputs"):
            body.append(figs.add(sink_schematic(design),
                                 f"The sink as designed: {design['ref']} diode-connected as the reference behind "
                                 f"{format_si(design['r_chosen'], 'ohm', 4)} from {format_si(design['supply'], 'V', 4)}, "
                                 f"{len(design['outputs'])} output(s) sharing its gate, each driving its load"
                                 + (f", {format_si(design['source_resistor'], 'ohm', 4)} in every source"
                                    if design.get("source_resistor") else "") + ". Currents are the design's.",
                                 "schematic of the current sink"))
        body.append(hp.design_tables(design))
        if design.get("outputs"):
            body.append(figs.add(outputs_figure(design, target),
                                 "Output currents (left, against the reference and target) and each output's error "
                                 "against the reference (right)" + (f", target band +/-{target * 100:g} %" if target
                                                                    else "") + "; red bars are out of compliance.",
                                 "bar charts of output currents and errors"))
        if errors:
            mc = design["monte_carlo"]
            note = "" if agree else (" These draws were made again from the stored parts and seed and do NOT "
                                     "reproduce the statistics stored with the design (the Monte Carlo changed "
                                     "since it was recorded); the tables show the stored ones.")
            body.append(figs.add(monte_carlo_figure(errors, target, int(mc["samples"])),
                                 f"Monte Carlo distribution of each output's error against the reference over "
                                 f"{mc['samples']} draws (seed {mc['seed']}; resistors uniform within "
                                 f"+/-{mc['resistor_tolerance'] * 100:g} %, fit parameters normal with their "
                                 f"standard errors)" + (f"; dashed: the +/-{target * 100:g} % target" if target
                                                        else "") + "." + note,
                                 "histograms of the output errors"))
        if data.reference is not None and data.reference.params is not None:
            supply, resistor = _number(design, "supply"), _number(design, "r_chosen")
            if supply and resistor and supply > 0 and resistor > 0:
                params: DeviceParams = data.reference.params
                rs = _number(design, "source_resistor") or 0.0
                vgs_solved, id_solved = solve_resistor_line(params, supply, resistor, rs)
                operating_point = {"part": data.reference.spec, "supply": supply, "resistor": resistor,
                                   "source_resistor": rs, "vgs": vgs_solved, "id": id_solved}
                body.append(figs.add(figures.operating_point_figure(
                    params, data.reference.label, supply, resistor, _number(design, "vgs"),
                    _number(design, "i_ref"), rs),
                    f"Operating point of the reference {data.reference.label}: its fitted curve, the resistor "
                    f"line from {format_si(supply, 'V', 4)}, the crossing solved again here (circle) and the design's "
                    f"recorded point (cross); two separate marks would mean a stale design.",
                    "operating point of the reference part"))
    elif design is not None:
        body.append(f"<h2>Design {hp.esc(design.get('design_id'))}: {hp.esc(design.get('kind') or 'not a sink')}</h2>")
        body.append(hp.matched_set_section(design))
    if design is not None and chosen:
        body.append("<h2>The design's parts</h2>")
        body += _part_figures(data, figs, chosen, vgs_cc)
    good = [p for p in data.parts if p.state != "rejected"]
    body.append("<h2>The lot</h2>")
    body.append(hp.statistics_table([(data.lot, stats), *data.other_lots]))
    body.append(figs.add(figures.sweeps_figure(data.traces, f"Lot {data.lot}: {len(data.traces)} sweep(s)", chosen),
                         "Every sweep of the lot, drain current on a log axis against VGS: the good parts in grey, the "
                         "design's parts in colour (left); the parts set aside as duds on their own axes (right).",
                         "all sweeps of the lot"))
    body.append(figs.add(figures.histograms_figure(good, chosen),
                         "Spread of the lot's threshold voltage and KP (good parts); the red line is the median, the "
                         "orange ticks the design's parts.", "histograms of threshold and KP"))
    body.append(figs.add(figures.scatter_figure(good, data.design_sets),
                         "KP against threshold for every good part with a KP curve; the design's parts circled, the "
                         "reference named.", "KP against threshold, chosen sets marked"))
    rows = [part_row(p) for p in data.parts]
    body.append(hp.parts_table(rows, chosen))
    body.append("<h2>Bench and sessions</h2>")
    body.append(hp.bench_section(data.sessions, __version__, data.fitter_versions))
    body.append(hp.cautions_section([], heading="Bench cautions"))
    counts = {s: sum(1 for p in data.parts if p.state == s) for s in ("in_stock", "reserved", "used", "rejected")}
    meta = (f"{len(data.parts)} part(s): " + ", ".join(f"{n} {s}" for s, n in counts.items() if n)
            + f". Library {data.library_path}. Written {utc_now()} by benchlab {__version__}.")
    title = f"benchlab report: lot {data.lot}" + (f", design {design.get('design_id')}" if design else "")
    index = folder / "index.html"
    tmp = folder / "index.html.tmp"
    tmp.write_text(hp.page(title, meta, body), encoding="utf-8")
    os.replace(tmp, index)
    pdf_path = None
    if pdf is not None:
        from benchlab.report.pdf import write_pdf

        pdf_path = str(write_pdf(pdf, title, [meta, *([sentence] if sentence else [])], figs.items))
    return ReportFiles(folder=str(folder), index=str(index), figures=tuple(c for _, c in figs.items),
                       operating_point=operating_point, pdf=pdf_path, verdict=sentence)
