"""Readable text reports of designs, matched sets and bins (pure: data in, text out)."""

from __future__ import annotations

import textwrap
from typing import Any, Mapping, Sequence

from benchlab.design.matching import MatchResult, VgsBin
from benchlab.design.sink import SinkDesign
from benchlab.units import format_si

def _pct(value: float) -> str:
    return f"{value * 100:+.3f} %"


# The sink design's tables, from its plain-JSON form (``SinkDesign.to_dict()``, as stored in the library): one
# formatter for the CLI's text and the HTML report, so both show the same numbers with the same units.
OUTPUT_COLUMNS = ("part", "current", "error", "compliance", "power", "%/K", "%/K alone")


def _has(d: Mapping[str, Any], *keys: str) -> bool:
    return all(isinstance(d.get(k), (int, float)) and not isinstance(d.get(k), bool) for k in keys)


def sink_parameter_rows(d: Mapping[str, Any]) -> list[tuple[str, str]]:
    """The design's figures as (name, value with units) rows: supply, resistor(s), reference, drifts, powers.

    A figure the design does not hold (an older or hand-made record) is left out.
    """
    rows = [("supply", format_si(d.get("supply"), "V", 4))]
    tolerance = d.get("resistor_tolerance") or 0.0
    if _has(d, "i_target"):
        rows.append(("target current", format_si(d["i_target"], "A", 4)))
        rows.append(("resistor", f"exact {format_si(d.get('r_exact'), 'ohm', 6)}, chosen {format_si(d.get('r_chosen'), 'ohm', 4)} "
                                 f"({d.get('series')}, +/-{tolerance * 100:g} %)"))
    else:
        rows.append(("resistor", f"{format_si(d.get('r_chosen'), 'ohm', 4)} (given)"))
    if (d.get("source_resistor") or 0) > 0:
        rows.append(("source resistor", f"{format_si(d['source_resistor'], 'ohm', 4)} in every source"))
    degeneration = d.get("degeneration")
    if degeneration:
        over = " in 95 % of the Monte Carlo's builds" if degeneration.get("over_spread") else ""
        rows.append(("degeneration", f"smallest {d.get('series')} value meeting {degeneration['target'] * 100:g} %{over}: "
                                     f"{format_si(degeneration['suggested_ohm'], 'ohm', 4)} (worst error "
                                     f"{degeneration['worst_error'] * 100:.3f} %, "
                                     f"{degeneration['worst_error_without'] * 100:.3f} % without)"))
    if _has(d, "vgs", "i_ref"):
        versus = f" ({_pct(d['i_ref'] / d['i_target'] - 1)} vs target)" if _has(d, "i_target") else ""
        rows.append(("reference", f"{d.get('ref')}: VGS {d['vgs']:.5f} V, I {format_si(d['i_ref'], 'A', 4)}{versus}"))
    if _has(d, "vg"):
        rows.append(("gate node", f"{d['vg']:.5f} V"))
    if _has(d, "di_ref_dvsupply", "i_ref"):
        rows.append(("dI/dVsupply", f"{format_si(d['di_ref_dvsupply'], 'A/V', 4)} "
                                    f"({d['di_ref_dvsupply'] / d['i_ref'] * 100:.3f} %/V)"))
    if _has(d, "drift_ref_per_k", "vth_tempco"):
        how = ("each part's own coefficients, see below" if d.get("thermal")
               else f"Vth {d['vth_tempco'] * 1e3:g} mV/K, KP ~ T^-1.5")
        rows.append(("drift", f"{d['drift_ref_per_k'] * 100:+.4f} %/K (all parts warming together, {how}, "
                              "resistors steady)"))
    if _has(d, "p_ref", "p_resistor"):
        rows.append(("dissipation", f"reference {format_si(d['p_ref'], 'W', 4)}, resistor {format_si(d['p_resistor'], 'W', 4)}"))
    return rows


def sink_output_rows(d: Mapping[str, Any]) -> list[tuple[str, ...]]:
    """One row per output, cells as in :data:`OUTPUT_COLUMNS` (units in each cell) plus a last cell of notes."""
    rows = []

    def fixed(value: Any, fmt: str, scale: float = 1.0, unit: str = "") -> str:
        return format(value * scale, fmt) + unit if isinstance(value, (int, float)) else "-"

    for o in d.get("outputs") or []:
        note = "" if o.get("in_compliance", True) else "OUT OF COMPLIANCE"
        if o.get("region") == "triode":
            note += " (triode, solved)"
        elif o.get("region") == "triode-unmodelled":
            note += " (triode; this law has no triode form: current overestimated)"
        rows.append((str(o.get("part")), format_si(o.get("i_out"), "A", 4), fixed(o.get("error"), "+.3f", 100, " %"),
                     fixed(o.get("v_compliance"), ".3f", 1, " V"), format_si(o.get("p_part"), "W", 4),
                     fixed(o.get("drift_per_k"), "+.4f", 100), fixed(o.get("tc_fixed_vgs"), "+.4f", 100),
                     note.strip()))
    return rows


def worst_error(d: Mapping[str, Any]) -> float:
    """Largest |error| among the outputs of a design's plain form (0 with none)."""
    return max((abs(o["error"]) for o in d.get("outputs") or [] if isinstance(o.get("error"), (int, float))),
               default=0.0)


def monte_carlo_rows(d: Mapping[str, Any]) -> tuple[str, list[tuple[str, str]]]:
    """Title and (quantity, spread) rows of the design's Monte Carlo run ("" and no rows without one)."""
    mc = d.get("monte_carlo")
    if not mc:
        return "", []
    title = (f"Monte Carlo ({mc['samples']} samples, seed {mc['seed']}, resistors +/-"
             f"{mc['resistor_tolerance'] * 100:g} % uniform, fit errors normal)")
    ref = mc["i_ref"]
    rows = [("reference", f"95 % in {format_si(ref['p2_5'], 'A', 4)} .. {format_si(ref['p97_5'], 'A', 4)}")]
    for o in mc["outputs"]:
        e = o["error"]
        rows.append((str(o["part"]), f"error 95 % in {e['p2_5'] * 100:+.3f} .. {e['p97_5'] * 100:+.3f} %, "
                                     f"sigma {e['std'] * 100:.3f} %"))
    return title, rows


def self_heating_rows(d: Mapping[str, Any]) -> tuple[str, list[tuple[str, str]]]:
    """Title and rows of the self-heated steady state ("" and no rows when it was not asked for)."""
    sh = d.get("self_heating")
    if not sh:
        return "", []
    rth = sh["thermal_resistance"]
    title = (f"Self-heating at {rth:g} K/W per part" if not isinstance(rth, (list, tuple))
             else f"Self-heating at each part's own Rth ({min(rth):.3g}-{max(rth):.3g} K/W)")
    if sh["runaway"]:
        return title, [("all parts", "THERMAL RUNAWAY: the junction temperatures do not settle")]
    rows = [("reference", f"+{sh['ref_rise']:.1f} K, I {format_si(sh['i_ref'], 'A', 4)}")]
    for o, rise, i_out, err in zip(d.get("outputs") or [], sh["output_rise"], sh["i_out"], sh["error"]):
        rows.append((str(o["part"]), f"+{rise:.1f} K, I {format_si(i_out, 'A', 4)}, error {_pct(err)}"))
    return title, rows


def thermal_rows(d: Mapping[str, Any]) -> tuple[str, list[tuple[str, str]]]:
    """Title and rows of each part's thermal values with their sources, the ZTC positions and the verdict."""
    parts = d.get("thermal") or []
    if not parts:
        return "", []
    rows = []
    by_output = {o.get("part"): o for o in d.get("outputs") or []}
    for tv in parts:
        src = tv.get("sources", {})
        ztc = f"ZTC {tv['ztc_vgs']:.2f} V / {format_si(tv['ztc_id'], 'A', 3)}" if tv.get("ztc_vgs") else "no ZTC"
        rows.append((str(tv["part"]), f"Vth {tv['vth_tempco'] * 1e3:+.2f} mV/K [{src.get('vth_tempco', '')}], "
                                      f"KP ~ T^-{tv['kp_exponent']:.2f} [{src.get('kp_exponent', '')}], "
                                      f"Rth {tv['rth_part']:.3g}+{tv['heatsink']:g} K/W [{src.get('rth', '')}], "
                                      f"{ztc} [{src.get('ztc', '')}]"))
        out = by_output.get(tv["part"])
        if out is not None and out.get("ztc"):
            rows.append(("", f"operating point {out['vgs']:.3f} V {out['ztc']}; loop gain {out.get('loop_gain', 0):.3f}"))
    verdict = (d.get("runaway") or {}).get("verdict")
    if verdict:
        rows.append(("verdict", verdict))
    return "Thermal values per part (source in brackets)", rows


def format_sink_report(design: SinkDesign | Mapping[str, Any], design_id: int | None = None) -> str:
    """The sink design as a readable report; it always ends with the cautions."""
    d = design.to_dict() if isinstance(design, SinkDesign) else design
    lines = []
    title = "Current sink design" if d.get("mode") == "synthesis" else "Current sink analysis"
    lines.append(title + (f" (saved as design {design_id}, parts reserved)" if design_id is not None else ""))
    lines += [f"  {name:<15} {value}" for name, value in sink_parameter_rows(d)]
    outputs = sink_output_rows(d)
    if outputs:
        lines.append(f"Outputs at {format_si(d.get('load_voltage'), 'V', 4)} across each (compliance margin "
                     f"{d.get('compliance_margin', 0):g} V):")
        widths = (16, 11, 10, 11, 10, 8, 10)
        lines.append("  " + " ".join(h.ljust(w) if k == 0 else h.rjust(w)
                                     for k, (h, w) in enumerate(zip(OUTPUT_COLUMNS, widths))))
        for row in outputs:
            cells = " ".join(c.ljust(w) if k == 0 else c.rjust(w) for k, (c, w) in enumerate(zip(row, widths)))
            lines.append(f"  {cells}" + (f"  {row[-1]}" if row[-1] else ""))
        lines.append(f"  worst error {worst_error(d) * 100:.3f} %   ('%/K alone': one output warming at a fixed "
                     "gate voltage)")
    for title, rows in (monte_carlo_rows(d), self_heating_rows(d), thermal_rows(d)):
        if rows:
            lines.append(title + ":")
            lines += [f"  {name:<10} {value}" for name, value in rows]
    if d.get("verdict"):
        lines.append(f"VERDICT  {d['verdict']}")
    lines.append("")
    lines.append("CAUTIONS")
    for caution in d.get("cautions") or []:
        lines.extend(textwrap.wrap(caution, width=100, initial_indent="  - ", subsequent_indent="    "))
    return "\n".join(lines) + "\n"


def format_match(result: MatchResult, asked: int | None = None) -> str:
    """Matched sets, one per line, best first, with what was optimised; ``asked`` is how many sets were asked for
    (None: as many as possible), to say why parts are left over."""
    span = (format_si(result.currents[0], "A", 4) if len(result.currents) == 1
            else f"{format_si(result.currents[0], 'A', 4)} .. {format_si(result.currents[-1], 'A', 4)} ({len(result.currents)} points)")
    lines = [f"Matched sets of {result.size} at {span}: {result.method}", f"  ({result.objective})"]
    for k, s in enumerate(result.sets, start=1):
        errs = ", ".join(f"{o} {_pct(e)}" for o, e in zip(s.outputs, s.errors))
        lines.append(f"  {k:>3}. ref {s.ref} (VGS {s.vgs_ref:.4f} V) -> {errs}; worst {s.worst_error * 100:.4f} %")
    if not result.sets:
        lines.append("  no set could be formed")
    if result.unmatched and asked is not None and len(result.sets) >= asked:
        lines.append(f"  {result.unmatched} part(s) not used: the {asked} set(s) asked for were found")
    elif result.unmatched and result.unmatched < result.size:
        lines.append(f"  {result.unmatched} part(s) left over: too few for another set of {result.size}")
    elif result.unmatched:
        lines.append(f"  {result.unmatched} part(s) left unmatched: no further set was found among them whose every "
                     f"output conducts (carries 2 uA or more) at the operating current")
    return "\n".join(lines) + "\n"


def format_bins(bins: Sequence[VgsBin], current: float, width: float, binning_id: int | None = None) -> str:
    """Bins of VGS at the operating current with their counts and members."""
    lines = [f"VGS bins at {format_si(current, 'A', 4)}, {width * 1e3:g} mV wide"
             + (f" (saved as binning {binning_id})" if binning_id is not None else "")]
    for b in bins:
        members = ", ".join(b.parts)
        lines.append(f"  {b.low:8.4f} .. {b.high:8.4f} V  {b.count:4d}  {members}")
    lines.append(f"  {sum(b.count for b in bins)} part(s) in {sum(1 for b in bins if b.count)} occupied bin(s)")
    return "\n".join(lines) + "\n"
