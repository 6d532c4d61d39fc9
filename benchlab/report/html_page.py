"""The report's HTML page: every piece of text escaped, styles inline, figures embedded as base64 PNG."""

from __future__ import annotations

import base64
import html
import math
from typing import Any, Iterable, Mapping, Sequence

from benchlab.design.text import (monte_carlo_rows, self_heating_rows, sink_output_rows,
                                  sink_parameter_rows)
from benchlab.design.verdict import DEFAULT_MISMATCH_TARGET
from benchlab.units import format_si

BENCH_CAUTIONS = (
    "Parts under test and their heat sinks get hot: let them cool before handling, and keep the dissipation "
    "within the part's safe operating area.",
    "Switch the supply off before rewiring the fixture; a powered part can be damaged (or damage the bench) "
    "when a lead is moved.",
    "The numbers here are estimates from bench measurements of individual parts. Local electrical codes, the "
    "part makers' ratings and licensed practice take precedence over anything in this report.",
)

_STYLE = """
body { font-family: sans-serif; margin: 2em; color: #222; max-width: 1100px; }
h1 { font-size: 1.5em; } h2 { font-size: 1.2em; margin-top: 1.6em; border-bottom: 1px solid #ccc; }
table { border-collapse: collapse; font-size: 0.85em; margin: 0.5em 0; }
th, td { border: 1px solid #ccc; padding: 2px 6px; text-align: right; }
th { background: #eee; } td.t { text-align: left; } caption { text-align: left; font-weight: bold; padding: 2px 0; }
tr.rejected td { color: #999; } tr.chosen td { background: #fff6d5; }
figure { margin: 1em 0; } figcaption { font-size: 0.9em; color: #333; }
img { max-width: 100%; border: 1px solid #ddd; }
.caution { background: #fff1f0; border-left: 4px solid #c0392b; padding: 0.5em 1em; }
.verdict { font-size: 1.1em; font-weight: bold; } .meets { color: #1e7d32; } .misses { color: #b71c1c; }
.summary { background: #f4f8fb; border-left: 4px solid #3b6ea5; padding: 0.5em 1em; }
.meta { color: #555; font-size: 0.9em; }
"""

POWER_RATINGS_W = (0.125, 0.25, 0.5, 1.0, 2.0, 3.0, 5.0, 10.0)  # common through-hole resistor ratings
DERATING = 2.0  # buy at least twice the dissipation (common practice; the design's own caution says so too)


def esc(value: Any) -> str:
    """Text made safe for HTML content and attribute values."""
    return html.escape("" if value is None else str(value), quote=True)


def num(value: float | None, fmt: str = ".4g", scale: float = 1.0) -> str:
    """A number for a table cell; ``-`` for missing or non-finite."""
    if value is None or (isinstance(value, float) and not math.isfinite(value)):
        return "-"
    return format(value * scale, fmt)


def table(head: Sequence[str], rows: Iterable[Sequence[Any]], caption: str = "",
          row_classes: Sequence[str] | None = None, text_columns: int = 1) -> str:
    """A table; every header and cell escaped. The first ``text_columns`` columns are left-aligned."""
    out = ["<table>" + (f"<caption>{esc(caption)}</caption>" if caption else "")
           + "<tr>" + "".join(f"<th>{esc(h)}</th>" for h in head) + "</tr>"]
    for k, row in enumerate(rows):
        cls = f' class="{esc(row_classes[k])}"' if row_classes and row_classes[k] else ""
        cells = "".join(f'<td class="t">{esc(c)}</td>' if j < text_columns else f"<td>{esc(c)}</td>"
                        for j, c in enumerate(row))
        out.append(f"<tr{cls}>{cells}</tr>")
    out.append("</table>")
    return "\n".join(out)


def figure_html(png: bytes, number: int, caption: str, alt: str) -> str:
    """A numbered figure with its caption, the image embedded (the page stands alone)."""
    data = base64.b64encode(png).decode("ascii")
    return (f'<figure id="fig{number}"><img src="data:image/png;base64,{data}" alt="{esc(alt)}">'
            f"<figcaption>Figure {number}. {esc(caption)}</figcaption></figure>")


def resistor_rating(dissipation_w: float) -> float | None:
    """The smallest common rating at least :data:`DERATING` times the dissipation (None above 10 W)."""
    need = DERATING * max(dissipation_w, 0.0)
    return next((r for r in POWER_RATINGS_W if r >= need), None)


def shopping_rows(design: Mapping[str, Any]) -> list[tuple[str, ...]]:
    """The resistors to buy: role, how many, value, series and tolerance, dissipation, rating to buy."""
    tolerance = f"{design.get('series', '')} +/-{(design.get('resistor_tolerance') or 0) * 100:g} %"
    rows = []

    def add(role: str, count: int, ohms: float, watts: float) -> None:
        rating = resistor_rating(watts)
        rows.append((role, str(count), format_si(ohms, "ohm", 4), tolerance, format_si(watts, "W", 4),
                     format_si(rating, "W", 4) if rating else "over 10 W: a power resistor on a heat sink"))

    add("reference resistor R", 1, design["r_chosen"], design.get("p_resistor") or 0.0)
    rs = design.get("source_resistor") or 0.0
    if rs > 0:
        outputs = design.get("outputs") or []
        worst = max([design["i_ref"] ** 2 * rs, *(o.get("p_source_resistor") or 0.0 for o in outputs)])
        add("source resistor Rs (one per part)", 1 + len(outputs), rs, worst)
    return rows


def verdict(design: Mapping[str, Any]) -> tuple[bool, str]:
    """Whether the design meets its target, and the sentence that says so.

    The target is the mismatch target the design was made for (``design sink --mismatch-target``), else the
    designer's default (5 %), as in the verdict ``design sink`` prints; every output must also stay in compliance
    and the junctions must settle (no thermal runaway). A design made without a target said it MEETS the target
    with any error and with thermal runaway, while the CLI called the same design NOT USABLE.
    """
    outputs = design.get("outputs") or []
    worst = max((abs(o["error"]) for o in outputs), default=0.0)
    out_of = [str(o["part"]) for o in outputs if not o.get("in_compliance", True)]
    target = (design.get("degeneration") or {}).get("target")
    runaway = design.get("runaway") if isinstance(design.get("runaway"), Mapping) else {}
    parts = []
    ok = not out_of and worst <= (target or DEFAULT_MISMATCH_TARGET) and not runaway.get("runaway")
    if target:
        parts.append(f"worst output error {worst * 100:.3f} % against a target of {target * 100:g} %")
    else:
        parts.append(f"worst output error {worst * 100:.3f} % against the default target of "
                     f"{DEFAULT_MISMATCH_TARGET * 100:g} %")
    if out_of:
        parts.append("out of compliance: " + ", ".join(out_of))
    else:
        parts.append(f"every output in compliance at {format_si(design.get('load_voltage'), 'V', 4)}")
    if runaway.get("runaway"):
        parts.append(str(runaway.get("verdict") or "THERMAL RUNAWAY"))
    return ok, ("MEETS the target at nominal values: " if ok else "MISSES the target: ") + "; ".join(parts)


def design_tables(design: Mapping[str, Any]) -> str:
    """The design's figures, outputs, Monte Carlo and self-heating tables (the CLI's formatter, as HTML)."""
    out = [table(("quantity", "value (with units)"), sink_parameter_rows(design), caption="Design figures")]
    outputs = sink_output_rows(design)
    if outputs:
        head = ("part", "current", "error vs reference", "compliance voltage", "dissipation",
                "drift, all warming (%/K)", "drift, one warming at fixed gate (%/K)", "notes")
        out.append(table(head, outputs, caption=f"Outputs at {format_si(design.get('load_voltage'), 'V', 4)} across each "
                                                f"(compliance margin {design.get('compliance_margin', 0):g} V)"))
    for title, rows in (monte_carlo_rows(design), self_heating_rows(design)):
        if rows:
            out.append(table(("quantity", "spread (with units)"), rows, caption=title))
    return "\n".join(out)


def matched_set_section(design: Mapping[str, Any]) -> str:
    """A recorded matched set (``design match --save``): how it was chosen, and each output's error."""
    chosen = design.get("set") if isinstance(design.get("set"), Mapping) else None
    currents = [c for c in design.get("currents") or [] if isinstance(c, (int, float))]
    span = " .. ".join(format_si(c, "A", 4) for c in (currents[:1] + currents[-1:] if len(currents) > 1 else currents))
    lines = [f"<p>{esc(design.get('method') or '')}: {esc(design.get('objective') or '')}"
             + (f" at {esc(span)}" if span else "") + ".</p>"]
    if chosen:
        rows = [(chosen.get("ref"), "reference", f"VGS {chosen['vgs_ref']:.4f} V" if isinstance(
                 chosen.get("vgs_ref"), (int, float)) else "-")]
        rows += [(name, "output", f"{error * 100:+.3f} %") for name, error in zip(chosen.get("outputs") or [],
                                                                                  chosen.get("errors") or [])]
        lines.append(table(("part", "role", "VGS of the reference / error vs reference"), rows,
                           caption=f"The matched set (worst error {num(chosen.get('worst_error'), '.3f', 100.0)} %)",
                           text_columns=2))
    return "\n".join(lines)


def parts_table(rows: Sequence[Mapping[str, Any]], chosen: Iterable[str]) -> str:
    """The parts of the lot, one row each (rows from :func:`benchlab.report.data.part_row`: the values the library
    stored), chosen highlighted."""
    chosen = set(chosen)
    head = ("part", "state", "sweep", "model", "Vth (V)", "sigma Vth (mV)", "KP (A/V^2)", "sigma KP (A/V^2)",
            "THETA (1/V)", "n", "VGS at 250 uA (V)", "gm (A/V)", "gm at", "flags / reason")
    cells, classes = [], []
    for r in rows:
        classes.append(" ".join(c for c in ("rejected" if r["state"] == "rejected" else "",
                                           "chosen" if r["label"] in chosen else "") if c))
        note = r["reason"] if r["state"] == "rejected" else (r["flags"] or "").replace(",", ", ")
        cells.append((r["label"], r["state"], r["classification"] or "-", r["model"] or "-", num(r["vth"], ".4f"),
                      num(r["vth_stderr"], ".2g", 1e3), num(r["kp"]), num(r["kp_stderr"], ".2g"),
                      num(r["theta"], ".3g"), num(r["n"], ".3f"), num(r["vth_cc"], ".4f"), num(r["gm"]),
                      format_si(r["gm_current"], "A") if r["gm"] is not None else "-", note or ""))
    return table(head, cells, caption="Parts of the lot (chosen parts highlighted, rejected parts greyed)",
                 row_classes=classes, text_columns=4)


def statistics_table(lots: Sequence[tuple[str, Mapping[str, Any]]]) -> str:
    """Count, yield, mean and sigma of Vth, KP and VGS at 250 uA, one row per lot (the report's lot first)."""
    head = ("lot", "parts", "good", "yield (%)", "Vth mean (V)", "Vth sigma (mV)", "KP mean (A/V^2)",
            "KP sigma (A/V^2)", "VGS at 250 uA mean (V)", "VGS at 250 uA sigma (mV)")
    rows = [(lot, stats["parts"], stats["good"], num(stats["yield"], ".1f", 100.0), num(stats["vth_mean"], ".4f"),
             num(stats["vth_std"], ".3g", 1e3), num(stats["kp_mean"]), num(stats["kp_std"], ".3g"),
             num(stats["vth_cc_mean"], ".4f"), num(stats["vth_cc_std"], ".3g", 1e3)) for lot, stats in lots]
    return table(head, rows, caption="Statistics by lot: this report's lot first, then the library's other lots "
                                     "(good parts; sigma is the sample standard deviation)",
                 row_classes=["chosen"] + [""] * (len(rows) - 1))


def bench_section(sessions: Sequence[Mapping[str, Any]], software: str, fitter_versions: Sequence[str]) -> str:
    """Bench and session details: instrument identities, fixture, series resistor, ambient, date, operator."""
    rows = []
    for meta in sessions:
        if meta.get("missing") is not None or "format" not in meta:
            rows.append((meta.get("id"), "-", "-", "-", "-", "-", f"session record not found at {meta.get('missing')}"))
            continue
        bench = meta.get("bench") or {}
        series = bench.get("series_resistor_ohm")
        fixture = str(bench.get("fixture") or "-")
        if series:
            fixture += f", series resistor {format_si(series, 'ohm', 6)} (measured)"
        identities = "; ".join(f"{role}: {idn}" for role, idn in (meta.get("instruments") or {}).items())
        ambient = meta.get("ambient_c")
        rows.append((meta.get("id"), f"{meta.get('started') or '-'} .. {meta.get('ended') or '-'}",
                     meta.get("operator") or "-", f"{ambient:g}" if isinstance(ambient, (int, float)) else "-",
                     fixture, identities or "-", ""))
    head = ("session", "date (UTC)", "operator", "ambient (degC)", "fixture", "instruments (*IDN?)", "note")
    return (table(head, rows, caption="Sessions the lot's sweeps came from", text_columns=len(head))
            + f'<p class="meta">Software: benchlab {esc(software)}; fitter version(s) of the parts\' curves: '
            + f"{esc(', '.join(fitter_versions) or '-')}.</p>")


def cautions_section(design_cautions: Sequence[str], heading: str = "Cautions") -> str:
    """The design's own cautions first, then the bench cautions every report carries."""
    items = [*design_cautions, *BENCH_CAUTIONS]
    return (f'<h2>{esc(heading)}</h2><div class="caution"><ul>' + "".join(f"<li>{esc(c)}</li>" for c in items)
            + "</ul></div>")


def page(title: str, meta: str, body_parts: Sequence[str]) -> str:
    """The whole document."""
    return ("<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">"
            f"<title>{esc(title)}</title><style>{_STYLE}</style></head><body>\n"
            f"<h1>{esc(title)}</h1><p class=\"meta\">{esc(meta)}</p>\n" + "\n".join(body_parts) + "\n</body></html>\n")
