"""Safety cautions that go with every current-sink design (part of the result, with its numbers)."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Sequence

from benchlab.design.thermal import RUNAWAY_RISE_K

# Junction-to-ambient resistance of a free-standing TO-220 without heat sink: about 60-62 K/W in
# typical datasheets (from memory). Used only to put a number on "needs a heat sink".
FREE_AIR_K_PER_W = 62.0
# Above this a free-standing TO-220 runs hotter than a finger should touch (common practice).
HEATSINK_ABOVE_W = 0.5


@dataclass(frozen=True)
class OutputHeat:
    """What the cautions need to know about one output."""

    part: str
    power_w: float
    tc_fixed_vgs: float  # relative current change per K at a fixed gate voltage
    in_compliance: bool
    v_compliance: float


def _w(value: float) -> str:
    return f"{value * 1e3:.0f} mW" if value < 1 else f"{value:.2f} W"


def sink_cautions(*, supply_v: float, load_voltage: float, p_ref: float, p_resistor: float, r_chosen: float,
                  outputs: Sequence[OutputHeat], p_source_resistors: float = 0.0, self_heating=None,
                  output_names: Sequence[str] = ()) -> tuple[str, ...]:
    """The cautions of one design, each a sentence or two with this design's numbers.

    Covers dissipation and heat-sinking, thermal runaway of power MOSFETs in linear mode,
    supply start-up transients for LED and laser loads, eye safety, outputs out of
    compliance, and that the result is an estimate that local codes and licensed practice override.
    """
    out: list[str] = []
    hottest = max(outputs, key=lambda o: o.power_w) if outputs else None
    total = p_ref + p_resistor + p_source_resistors + sum(o.power_w for o in outputs)
    text = (f"Dissipation: {_w(total)} in all, reference part {_w(p_ref)}, resistor {_w(p_resistor)} "
            f"({r_chosen:g} ohm; buy it rated at least twice that, common practice)")
    if hottest is not None:
        rise = hottest.power_w * FREE_AIR_K_PER_W
        text += (f", each output up to {_w(hottest.power_w)} ({hottest.part}) with {load_voltage:g} V across the sink. "
                 f"Free-standing in a TO-220 (about {FREE_AIR_K_PER_W:.0f} K/W junction to ambient, a typical "
                 f"datasheet figure) that is a rise of about {rise:.0f} K")
        if hottest.power_w > HEATSINK_ABOVE_W:
            text += "; mount the outputs on a heat sink sized for the total and keep within the datasheet's DC safe operating area"
        text += ". Heat sinks and parts get hot enough to burn: let them cool before touching."
    else:
        text += "."
    out.append(text)

    runaway = [o for o in outputs if o.tc_fixed_vgs > 0]
    base = ("Thermal runaway: power MOSFETs run in linear mode below their zero-temperature-coefficient point conduct "
            "more when hotter, a positive feedback that can destroy them (Spirito et al., \"Thermal instabilities in "
            "high current power MOS devices\", MIEL 2002).")
    if runaway:
        worst = max(runaway, key=lambda o: o.tc_fixed_vgs)
        base += (f" In this design {len(runaway)} of {len(outputs)} outputs sit below that point: at a fixed gate "
                 f"voltage {worst.part} conducts {worst.tc_fixed_vgs * 100:+.2f} % per K. Share one heat sink between "
                 "reference and outputs, consider source resistors (degeneration), and derate.")
    elif outputs:
        base += (" This design's outputs sit above it at the stated threshold temperature coefficient; check again "
                 "if that coefficient is a guess.")
    else:
        base += " Check each output part you add against it."
    out.append(base)
    if self_heating is not None:
        rth = self_heating.thermal_resistance
        rth_words = (f"{rth:g} K/W per part" if not isinstance(rth, tuple)
                     else f"each part's own {min(rth):.3g}-{max(rth):.3g} K/W")
        if self_heating.runaway:
            out.append(f"Self-heating at {rth_words}: THERMAL RUNAWAY predicted, the junctions do not settle "
                       f"below {RUNAWAY_RISE_K:.0f} K above ambient. Use a larger heat sink (lower K/W), source resistors, "
                       "or a lower load voltage.")
        elif self_heating.output_rise:
            hottest = max(range(len(self_heating.output_rise)), key=lambda k: self_heating.output_rise[k])
            worst = max(range(len(self_heating.error)), key=lambda k: abs(self_heating.error[k]))
            name = output_names[worst] if output_names else f"output {worst + 1}"
            out.append(f"Self-heating at {rth_words}: the reference settles {self_heating.ref_rise:.0f} K and "
                       f"the outputs up to {self_heating.output_rise[hottest]:.0f} K above ambient; the worst output "
                       f"error then becomes {self_heating.error[worst] * 100:+.2f} % ({name}). Reference and outputs "
                       "dissipate differently, so a shared heat sink or degeneration keeps them closer.")

    out.append(f"Start-up: when the {supply_v:g} V supply or the load supply comes up, the gate node and the load can "
               "overshoot before the reference settles; LED strings and especially laser diodes are damaged by short "
               "current spikes. Bring the load supply up after the reference, add a soft start, and watch the first "
               "power-up with a current probe or a dummy load.")
    out.append("Eye safety: high-power LEDs (including horticultural red, blue, UV and IR emitters, which may be "
               "invisible) and lasers can injure eyes and skin. Do not look into emitters; shield them while testing and "
               "follow IEC 62471 (lamps and LEDs) and IEC 60825-1 (lasers).")
    for o in outputs:
        if not o.in_compliance:
            out.append(f"Compliance: {o.part} needs at least {o.v_compliance:.2f} V across it (margin included) to "
                       f"stay in saturation but the load voltage is {load_voltage:g} V; its current then depends on "
                       "the load voltage and no longer mirrors the reference.")
    out.append("This is an estimate from fitted models of measured parts at one temperature; it is not a certified "
               "design. Local electrical codes, the parts' datasheets and licensed practice override it. Switch off and "
               "discharge before touching the circuit, and verify the currents by measurement.")
    return tuple(out)
