"""The current sink as designed, drawn with schemdraw onto a matplotlib figure (Agg, no display)."""

from __future__ import annotations

from typing import Any, Mapping

import schemdraw
import schemdraw.elements as elm
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure

from benchlab.units import format_si

MAX_DRAWN_OUTPUTS = 4  # more outputs: the first ones, a gap, and the last one (all are in the outputs table)
_PITCH = 3.6  # horizontal distance between outputs (schemdraw units)


def _short(name: Any) -> str:
    return str(name).rsplit("/", 1)[-1]


def sink_schematic(design: Mapping[str, Any]) -> Figure:
    """Reference branch (supply, resistor, diode-connected part, source resistor) and the outputs sharing its gate.

    Each output drives its load (drawn as an LED string) from the load supply; with degeneration every source
    has its resistor. The values are the design's: supply, chosen resistor with its series and tolerance,
    source resistor, each part's label and current.

    Parameters
    ----------
    design : mapping
        A sink design's plain form (``SinkDesign.to_dict()``, or as stored in the library).

    Returns
    -------
    matplotlib.figure.Figure
    """
    outputs = list(design.get("outputs") or [])
    shown: list = outputs
    if len(outputs) > MAX_DRAWN_OUTPUTS:
        shown = [*outputs[:MAX_DRAWN_OUTPUTS - 1], None, outputs[-1]]
    rs = float(design.get("source_resistor") or 0.0)
    fig = Figure(figsize=(min(4.0 + 2.1 * len(shown), 11.0), 5.6), dpi=100)
    FigureCanvasAgg(fig)
    ax = fig.add_subplot()
    ax.set_axis_off()
    tolerance = (design.get("resistor_tolerance") or 0.0) * 100
    d = schemdraw.Drawing(canvas=ax, show=False)
    if True:
        d.config(fontsize=9, unit=2.2)
        d += elm.Vdd().at((0, 4.2)).label(f"{format_si(design['supply'], 'V', 4)}")
        d += elm.Resistor().at((0, 4.2)).down().to((0, 1.0)).label(
            f"R {format_si(design['r_chosen'], 'ohm', 4)}\n{design.get('series', '')} +/-{tolerance:g} %\n"
            f"{format_si(design.get('p_resistor'), 'W', 4)}", loc="bottom")
        d += elm.Dot().at((0, 1.0))
        d += elm.Line().at((0, 1.0)).to((0, 0))
        ref = elm.NFet(anchor="drain").at((0, 0)).theta(0).label(
            f"{_short(design['ref'])}\n(reference)\n{format_si(design['i_ref'], 'A', 4)}", loc="left", ofst=(-0.1, 0))
        d += ref
        gate = ref.absanchors["gate"]
        d += elm.Line().at((0, 1.0)).to((gate[0], 1.0))
        d += elm.Line().at((gate[0], 1.0)).to(gate)
        _source_to_ground(d, ref.absanchors["source"], rs, f"Rs {format_si(rs, 'ohm', 4)}")
        # the gate bus runs below the gates and crosses each output's source lead (no dot: not connected)
        bus_y = gate[1] - 1.1
        d += elm.Line().at(gate).to((gate[0], bus_y))
        x = gate[0]
        for item in shown:
            x_next = x + _PITCH
            d += elm.Line().at((x, bus_y)).to((x_next, bus_y))
            if item is None:
                d += elm.Label().at((x + 1.2 * _PITCH, gate[1])).label(
                    f"... {len(outputs) - MAX_DRAWN_OUTPUTS + 1} more ...")
                x = x_next
                continue
            fet = elm.NFet(anchor="gate").at((x_next, gate[1])).theta(0).reverse().label(
                f"{_short(item['part'])}\n{format_si(item['i_out'], 'A', 4)}", loc="right", ofst=(0.1, 0))
            d += fet
            d += elm.Dot().at((x_next, bus_y))
            d += elm.Line().at((x_next, bus_y)).to((x_next, gate[1]))
            drain = fet.absanchors["drain"]
            d += elm.LED().at(drain).up().reverse().label("load", loc="bottom")
            d += elm.Vdd().label("load supply")
            _source_to_ground(d, fet.absanchors["source"], rs, "Rs")
            x = x_next
    d.draw(show=False)
    fig.text(0.5, 0.01, f"each output: {format_si(design.get('load_voltage'), 'V', 4)} from drain to ground (the load "
             "supply less the load's drop)", ha="center", fontsize=8)
    return fig


def _source_to_ground(d: schemdraw.Drawing, source, rs: float, label: str) -> None:
    d += elm.Line().at(source).down(0.8)
    if rs > 0:
        d += elm.Resistor().down().label(label, loc="bottom")
    d += elm.Ground()
