"""Readable text reports of designs, matched sets and bins (pure: data in, text out)."""

from __future__ import annotations

import textwrap
from typing import Sequence

from benchlab.design.matching import MatchResult, VgsBin
from benchlab.design.sink import SinkDesign
from benchlab.units import format_si

def _pct(value: float) -> str:
    return f"{value * 100:+.3f} %"


def format_sink_report(design: SinkDesign, design_id: int | None = None) -> str:
    """The sink design as a readable report; it always ends with the cautions."""
    lines = []
    title = "Current sink design" if design.mode == "synthesis" else "Current sink analysis"
    lines.append(title + (f" (saved as design {design_id}, parts reserved)" if design_id is not None else ""))
    lines.append(f"  supply          {format_si(design.supply, 'V', 4)}")
    if design.i_target is not None:
        lines.append(f"  target current  {format_si(design.i_target, 'A', 4)}")
        lines.append(f"  resistor        exact {format_si(design.r_exact, 'ohm', 6)}, chosen {format_si(design.r_chosen, 'ohm', 4)} "
                     f"({design.series}, +/-{design.resistor_tolerance * 100:g} %)")
    else:
        lines.append(f"  resistor        {format_si(design.r_chosen, 'ohm', 4)} (given)")
    if design.source_resistor > 0:
        lines.append(f"  source resistor {format_si(design.source_resistor, 'ohm', 4)} in every source")
    if design.degeneration:
        d = design.degeneration
        lines.append(f"  degeneration    smallest {design.series} value meeting {d['target'] * 100:g} %: "
                     f"{format_si(d['suggested_ohm'], 'ohm', 4)} (worst error {d['worst_error'] * 100:.3f} %, "
                     f"{d['worst_error_without'] * 100:.3f} % without)")
    lines.append(f"  reference       {design.ref}: VGS {design.vgs:.5f} V, I {format_si(design.i_ref, 'A', 4)}"
                 + (f" ({_pct(design.i_ref / design.i_target - 1)} vs target)" if design.i_target else ""))
    lines.append(f"  gate node       {design.vg:.5f} V")
    lines.append(f"  dI/dVsupply     {format_si(design.di_ref_dvsupply, 'A/V', 4)} "
                 f"({design.di_ref_dvsupply / design.i_ref * 100:.3f} %/V)")
    lines.append(f"  drift           {design.drift_ref_per_k * 100:+.4f} %/K (all parts warming together, "
                 f"Vth {design.vth_tempco * 1e3:g} mV/K, KP ~ T^-1.5, resistors steady)")
    lines.append(f"  dissipation     reference {format_si(design.p_ref, 'W', 4)}, resistor {format_si(design.p_resistor, 'W', 4)}")
    if design.outputs:
        lines.append(f"Outputs at {format_si(design.load_voltage, 'V', 4)} across each (compliance margin "
                     f"{design.compliance_margin:g} V):")
        header = f"  {'part':<16} {'current':>11} {'error':>10} {'compliance':>11} {'power':>10} {'%/K':>8} {'%/K alone':>10}"
        lines.append(header)
        for o in design.outputs:
            flag = "" if o.in_compliance else "  OUT OF COMPLIANCE"
            if o.region == "triode":
                flag += " (triode, solved)"
            elif o.region == "triode-unmodelled":
                flag += " (triode; this law has no triode form: current overestimated)"
            lines.append(f"  {o.part:<16} {format_si(o.i_out, 'A', 4):>11} {_pct(o.error):>10} {o.v_compliance:>9.3f} V "
                         f"{format_si(o.p_part, 'W', 4):>10} {o.drift_per_k * 100:>+8.4f} {o.tc_fixed_vgs * 100:>+10.4f}{flag}")
        lines.append(f"  worst error {design.worst_error * 100:.3f} %   ('%/K alone': one output warming at a fixed "
                     "gate voltage)")
    if design.monte_carlo:
        mc = design.monte_carlo
        lines.append(f"Monte Carlo ({mc['samples']} samples, seed {mc['seed']}, resistors +/-"
                     f"{mc['resistor_tolerance'] * 100:g} % uniform, fit errors normal):")
        ref = mc["i_ref"]
        lines.append(f"  reference  95 % in {format_si(ref['p2_5'], 'A', 4)} .. {format_si(ref['p97_5'], 'A', 4)}")
        for o in mc["outputs"]:
            e = o["error"]
            lines.append(f"  {o['part']:<10} error 95 % in {e['p2_5'] * 100:+.3f} .. {e['p97_5'] * 100:+.3f} %, "
                         f"sigma {e['std'] * 100:.3f} %")
    if design.self_heating:
        sh = design.self_heating
        lines.append(f"Self-heating at {sh['thermal_resistance']:g} K/W per part:")
        if sh["runaway"]:
            lines.append("  THERMAL RUNAWAY: the junction temperatures do not settle")
        else:
            lines.append(f"  reference +{sh['ref_rise']:.1f} K, I {format_si(sh['i_ref'], 'A', 4)}")
            for o, rise, i_out, err in zip(design.outputs, sh["output_rise"], sh["i_out"], sh["error"]):
                lines.append(f"  {o.part:<16} +{rise:.1f} K, I {format_si(i_out, 'A', 4)}, error {_pct(err)}")
    lines.append("")
    lines.append("CAUTIONS")
    for caution in design.cautions:
        lines.extend(textwrap.wrap(caution, width=100, initial_indent="  - ", subsequent_indent="    "))
    return "\n".join(lines) + "\n"


def format_match(result: MatchResult) -> str:
    """Matched sets, one per line, best first, with what was optimised."""
    span = (format_si(result.currents[0], "A", 4) if len(result.currents) == 1
            else f"{format_si(result.currents[0], 'A', 4)} .. {format_si(result.currents[-1], 'A', 4)} ({len(result.currents)} points)")
    lines = [f"Matched sets of {result.size} at {span}: {result.method}", f"  ({result.objective})"]
    for k, s in enumerate(result.sets, start=1):
        errs = ", ".join(f"{o} {_pct(e)}" for o, e in zip(s.outputs, s.errors))
        lines.append(f"  {k:>3}. ref {s.ref} (VGS {s.vgs_ref:.4f} V) -> {errs}; worst {s.worst_error * 100:.4f} %")
    if not result.sets:
        lines.append("  no set could be formed")
    lines.append(f"  {result.unmatched} part(s) left unmatched")
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
