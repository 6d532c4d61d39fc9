"""Readable text reports of designs, matched sets and bins (pure: data in, text out)."""

from __future__ import annotations

import math
import textwrap
from typing import Sequence

from benchlab.design.matching import MatchResult, VgsBin
from benchlab.design.sink import SinkDesign

_PREFIXES = ((1e9, "G"), (1e6, "M"), (1e3, "k"), (1.0, ""), (1e-3, "m"), (1e-6, "u"), (1e-9, "n"), (1e-12, "p"))


def si(value: float | None, unit: str, digits: int = 4) -> str:
    """``0.008085`` A -> ``"8.085 mA"``; None -> ``"-"``."""
    if value is None:
        return "-"
    if value == 0 or not math.isfinite(value):
        return f"{value:g} {unit}"
    for scale, prefix in _PREFIXES:
        if abs(value) >= scale * 0.9995:
            return f"{value / scale:.{digits}g} {prefix}{unit}"
    return f"{value:.{digits}g} {unit}"


def _pct(value: float) -> str:
    return f"{value * 100:+.3f} %"


def format_sink_report(design: SinkDesign, design_id: int | None = None) -> str:
    """The sink design as a readable report; it always ends with the cautions."""
    lines = []
    title = "Current sink design" if design.mode == "synthesis" else "Current sink analysis"
    lines.append(title + (f" (saved as design {design_id}, parts reserved)" if design_id is not None else ""))
    lines.append(f"  supply          {si(design.supply, 'V')}")
    if design.i_target is not None:
        lines.append(f"  target current  {si(design.i_target, 'A')}")
        lines.append(f"  resistor        exact {si(design.r_exact, 'ohm', 6)}, chosen {si(design.r_chosen, 'ohm')} "
                     f"({design.series}, +/-{design.resistor_tolerance * 100:g} %)")
    else:
        lines.append(f"  resistor        {si(design.r_chosen, 'ohm')} (given)")
    if design.source_resistor > 0:
        lines.append(f"  source resistor {si(design.source_resistor, 'ohm')} in every source")
    if design.degeneration:
        d = design.degeneration
        lines.append(f"  degeneration    smallest {design.series} value meeting {d['target'] * 100:g} %: "
                     f"{si(d['suggested_ohm'], 'ohm')} (worst error {d['worst_error'] * 100:.3f} %, "
                     f"{d['worst_error_without'] * 100:.3f} % without)")
    lines.append(f"  reference       {design.ref}: VGS {design.vgs:.5f} V, I {si(design.i_ref, 'A')}"
                 + (f" ({_pct(design.i_ref / design.i_target - 1)} vs target)" if design.i_target else ""))
    lines.append(f"  gate node       {design.vg:.5f} V")
    lines.append(f"  dI/dVsupply     {si(design.di_ref_dvsupply, 'A/V')} "
                 f"({design.di_ref_dvsupply / design.i_ref * 100:.3f} %/V)")
    lines.append(f"  drift           {design.drift_ref_per_k * 100:+.4f} %/K (all parts warming together, "
                 f"Vth {design.vth_tempco * 1e3:g} mV/K, KP ~ T^-1.5, resistors steady)")
    lines.append(f"  dissipation     reference {si(design.p_ref, 'W')}, resistor {si(design.p_resistor, 'W')}")
    if design.outputs:
        lines.append(f"Outputs at {si(design.load_voltage, 'V')} across each (compliance margin "
                     f"{design.compliance_margin:g} V):")
        header = f"  {'part':<16} {'current':>11} {'error':>10} {'compliance':>11} {'power':>10} {'%/K':>8} {'%/K alone':>10}"
        lines.append(header)
        for o in design.outputs:
            flag = "" if o.in_compliance else "  OUT OF COMPLIANCE"
            if o.region == "triode":
                flag += " (triode, solved)"
            elif o.region == "triode-unmodelled":
                flag += " (triode; this law has no triode form: current overestimated)"
            lines.append(f"  {o.part:<16} {si(o.i_out, 'A'):>11} {_pct(o.error):>10} {o.v_compliance:>9.3f} V "
                         f"{si(o.p_part, 'W'):>10} {o.drift_per_k * 100:>+8.4f} {o.tc_fixed_vgs * 100:>+10.4f}{flag}")
        lines.append(f"  worst error {design.worst_error * 100:.3f} %   ('%/K alone': one output warming at a fixed "
                     "gate voltage)")
    if design.monte_carlo:
        mc = design.monte_carlo
        lines.append(f"Monte Carlo ({mc['samples']} samples, seed {mc['seed']}, resistors +/-"
                     f"{mc['resistor_tolerance'] * 100:g} % uniform, fit errors normal):")
        ref = mc["i_ref"]
        lines.append(f"  reference  95 % in {si(ref['p2_5'], 'A')} .. {si(ref['p97_5'], 'A')}")
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
            lines.append(f"  reference +{sh['ref_rise']:.1f} K, I {si(sh['i_ref'], 'A')}")
            for o, rise, i_out, err in zip(design.outputs, sh["output_rise"], sh["i_out"], sh["error"]):
                lines.append(f"  {o.part:<16} +{rise:.1f} K, I {si(i_out, 'A')}, error {_pct(err)}")
    lines.append("")
    lines.append("CAUTIONS")
    for caution in design.cautions:
        lines.extend(textwrap.wrap(caution, width=100, initial_indent="  - ", subsequent_indent="    "))
    return "\n".join(lines) + "\n"


def format_match(result: MatchResult) -> str:
    """Matched sets, one per line, best first, with what was optimised."""
    span = (si(result.currents[0], "A") if len(result.currents) == 1
            else f"{si(result.currents[0], 'A')} .. {si(result.currents[-1], 'A')} ({len(result.currents)} points)")
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
    lines = [f"VGS bins at {si(current, 'A')}, {width * 1e3:g} mV wide"
             + (f" (saved as binning {binning_id})" if binning_id is not None else "")]
    for b in bins:
        members = ", ".join(b.parts)
        lines.append(f"  {b.low:8.4f} .. {b.high:8.4f} V  {b.count:4d}  {members}")
    lines.append(f"  {sum(b.count for b in bins)} part(s) in {sum(1 for b in bins if b.count)} occupied bin(s)")
    return "\n".join(lines) + "\n"


_SUFFIXES = {"G": 1e9, "M": 1e6, "k": 1e3, "K": 1e3, "m": 1e-3, "u": 1e-6, "µ": 1e-6, "n": 1e-9, "p": 1e-12}


def parse_quantity(text: str) -> float:
    """A number with an optional SI prefix and unit: ``"20m"``, ``"20mA"``, ``"4.7k"``, ``"1e-3"``, ``"12V"``.

    Raises ``ValueError`` (argparse turns it into a usage error) when it is not a finite number.
    """
    raw = str(text).strip()
    body = raw
    for unit in ("ohm", "Ohm", "A", "V", "W", "R"):
        if body.endswith(unit) and len(body) > len(unit):
            body = body[: -len(unit)]
            break
    scale = 1.0
    if body and body[-1] in _SUFFIXES and not body[-1].isdigit():
        scale = _SUFFIXES[body[-1]]
        body = body[:-1]
    value = float(body) * scale
    if not math.isfinite(value):
        raise ValueError(f"not a finite number: {raw}")
    return value
