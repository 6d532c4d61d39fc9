"""SPICE export: ``.model`` cards for fitted parts and an operating-point netlist of a designed sink.

Cards are written for instances with ``W=1 L=1`` so KP is the fitted KP (SPICE level-1
convention, Beta = KP W / L). Mapping of our models (see ``benchlab.models``):

- ``square``: LEVEL=1, VTO, KP (LAMBDA when known).
- ``theta``: LEVEL=3 with THETA; with the level-3 defaults (GAMMA, VMAX, ETA, NFS = 0) and L = 1 m
  its saturation current is (KP/2) Vov^2 / (1 + THETA Vov), the same law as ours.
- ``ekv``: its strong-inversion equivalent (LEVEL=3, VTO, KP, THETA); the weak-inversion tail
  is not represented and the card says so.
- ``linear``: the square law that has the same current and the same gm at one current
  ``at_current`` (VTO = Vth - I/gm, KP = gm^2 / 2I); exact there only, and the card says so.

The sink netlist runs in ngspice as-is (``ngspice -b sink.cir``): it has ``.op`` and a small
``.control`` block that prints the reference and output currents with full precision.
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from typing import Sequence

from benchlab.design.parts import Part
from benchlab.errors import InputError
from benchlab.models import DeviceParams
from benchlab.names import spice_comment

# Tight tolerances so ngspice's answer is reference data (about 1e-7), not 1 % near threshold.
SPICE_OPTIONS = ".options RELTOL=1e-7 VNTOL=1e-9 ABSTOL=1e-15"

DEFAULT_LINEAR_AT_CURRENT = 0.01  # A; where a linear-model part's square-law equivalent is exact


def _num(value: float) -> str:
    return f"{float(value):.10g}"


def sanitize_model_name(label: str) -> str:
    """A SPICE-safe model name from a part label: letters, digits and ``_``, starting with a letter.

    ``"bag-7/Q 3"`` becomes ``"bag_7_Q_3"``; ``"07"`` becomes ``"M07"``.
    """
    name = re.sub(r"[^A-Za-z0-9_]+", "_", str(label)).strip("_")
    if not name:
        name = "PART"
    if not name[0].isalpha():
        name = "M" + name
    return name


def unique_model_names(labels: Sequence[str], taken: Sequence[str] = ()) -> list[str]:
    """Sanitized names for ``labels``, made unique case-insensitively (SPICE ignores case), also against the
    names ``taken`` by other cards of the same file (ngspice silently uses the first card of a name)."""
    seen: dict[str, int] = {name.lower(): 0 for name in taken}
    out = []
    for label in labels:
        base = sanitize_model_name(label)
        name = base
        count = seen.get(base.lower(), 0)
        while name.lower() in seen:
            count += 1
            name = f"{base}_{count}"
        seen[base.lower()] = count
        seen[name.lower()] = 0
        out.append(name)
    return out


@dataclass(frozen=True)
class SpiceCard:
    """One ``.model`` card: the name used in netlists, the card text, and the level used."""

    name: str
    level: int
    text: str

    def to_dict(self) -> dict:
        """Plain-JSON form (SI units)."""
        return {"name": self.name, "level": self.level, "text": self.text}


def equivalent_square_law(params: DeviceParams, at_current: float) -> tuple[float, float]:
    """(VTO, KP) of the square law with the same current and gm as ``params`` at ``at_current``.

    Used for ``linear`` parts, whose straight line SPICE level 1/3 cannot express, and for ``ekv``
    parts in a circuit netlist, at the part's operating current.
    """
    if not at_current > 0:
        raise InputError("the current where a part's square-law SPICE equivalent is exact must be > 0 A")
    vgs = float(params.vgs_at(at_current))
    gm = float(params.gm_at(at_current))
    vov = 2.0 * at_current / gm
    return vgs - vov, gm / vov


def model_card(label: str, params: DeviceParams, *, name: str | None = None, lambda_: float | None = None,
               polarity: str = "N", lot: str = "", at_current: float | None = None) -> SpiceCard:
    """The ``.model`` card of one part.

    Parameters
    ----------
    label : str
        Part label (named in the comment; the model name is its sanitized form unless ``name``).
    params : DeviceParams
        The part's fitted curve.
    name : str, optional
        Model name to use (already SPICE-safe), e.g. from :func:`unique_model_names`.
    lambda_ : float, optional
        Channel-length modulation LAMBDA (1/V) when known; a diode-connected sweep alone cannot
        separate it, so it is left out unless given.
    polarity : str
        ``"N"`` (NMOS) or ``"P"`` (PMOS; ``vth`` is then taken as the threshold magnitude and
        written as a negative VTO).
    lot : str
        Lot name for the comment.
    at_current : float, optional
        For ``linear`` parts: the drain current (A) where the square-law equivalent is exact
        (default 10 mA). For ``ekv`` parts: when given (a circuit's operating point), the card is
        the square law exact there instead of the strong-inversion level-3 equivalent.

    Returns
    -------
    SpiceCard
    """
    pol = str(polarity).upper()
    if pol not in ("N", "P"):
        raise InputError(f"polarity must be N or P, got '{polarity}'")
    model_name = name or sanitize_model_name(label)
    sign = 1.0 if pol == "N" else -1.0
    where = f" (lot {spice_comment(lot)})" if lot else ""
    comments = [f"* {spice_comment(label)}{where}: {params.model} fit at {params.temperature_k - 273.15:.1f} degC; "
                "use W=1 L=1 (KP per square)"]
    fields: list[tuple[str, float]] = []
    if params.model == "linear":
        current = DEFAULT_LINEAR_AT_CURRENT if at_current is None else at_current
        vto, kp = equivalent_square_law(params, current)
        level = 1
        fields = [("VTO", sign * vto), ("KP", kp)]
        comments.append(f"* linear model Vth={_num(params.vth)} V gm={_num(params.gm)} A/V: square-law "
                        f"equivalent with the same ID and gm at ID={_num(current)} A, exact only there")
    elif params.model == "ekv" and at_current is not None and at_current > 0:
        # In a circuit's netlist the part sits at one known current: there the strong-inversion
        # equivalent below can miss by tens of percent (it drops the weak-inversion tail that the
        # fit's threshold sits in), so use the square law that is exact in ID and gm at that current.
        vto, kp = equivalent_square_law(params, at_current)
        level = 1
        fields = [("VTO", sign * vto), ("KP", kp)]
        comments.append(f"* ekv fit Vth={_num(params.vth)} V KP={_num(params.kp)} THETA={_num(params.theta)} "
                        f"n={_num(params.n)}: square-law equivalent with the same ID and gm at "
                        f"ID={_num(at_current)} A (this circuit's operating point), exact only there")
    elif params.model == "square":
        level = 1
        fields = [("VTO", sign * params.vth), ("KP", params.kp)]
    else:
        level = 3
        fields = [("VTO", sign * params.vth), ("KP", params.kp), ("THETA", params.theta)]
        if params.model == "ekv":
            comments.append(f"* ekv fit (n={_num(params.n)}): strong-inversion level-3 equivalent; "
                            "the weak-inversion tail below threshold is not modelled")
    if lambda_ is not None:
        fields.append(("LAMBDA", lambda_))
    fields.append(("TNOM", params.temperature_k - 273.15))
    body = " ".join(f"{k}={_num(v)}" for k, v in fields)
    kind = "NMOS" if pol == "N" else "PMOS"
    text = "\n".join(comments + [f".model {model_name} {kind} (LEVEL={level} {body})"])
    return SpiceCard(name=model_name, level=level, text=text)


def model_names_in(text: str) -> list[str]:
    """The names of the ``.model`` cards in a SPICE text, in order."""
    return re.findall(r"^\s*\.model\s+(\S+)", text, flags=re.MULTILINE | re.IGNORECASE)


def model_cards(parts: Sequence[Part], *, lambdas: dict[str, float] | None = None,
                at_currents: Sequence[float | None] | None = None, taken: Sequence[str] = (),
                suffix: str = "") -> list[SpiceCard]:
    """Cards for several parts with unique model names (in the order given).

    ``lambdas`` maps a part label to its LAMBDA; ``at_currents`` gives, per part, where a
    linear part's equivalent is exact (None for the default). ``taken``: model names already used in the
    file (the new cards avoid them); ``suffix`` is added to each label before it becomes a name.
    """
    names = unique_model_names([p.label + suffix for p in parts], taken)
    lambdas = lambdas or {}
    currents = list(at_currents) if at_currents is not None else [None] * len(parts)
    return [model_card(p.label, p.params, name=n, lambda_=lambdas.get(p.label), lot=p.lot, at_current=c)
            for p, n, c in zip(parts, names, currents)]


def model_library(parts: Sequence[Part], title: str = "benchlab SPICE models") -> str:
    """A text file of cards for ``parts`` (what ``benchlab export spice`` writes)."""
    cards = model_cards(parts)
    return "\n".join([f"* {spice_comment(title)}", *[c.text for c in cards], ""])


def sink_netlist(supply_v: float, resistor_ohm: float, ref: Part, outputs: Sequence[Part],
                 load_voltage: float, *, source_resistor_ohm: float = 0.0,
                 operating_currents: Sequence[float] | None = None, title: str = "benchlab current sink",
                 taken_names: Sequence[str] = ()) -> str:
    """Netlist of a current sink: supply, resistor, diode-connected reference, outputs with loads.

    Parameters
    ----------
    supply_v, resistor_ohm : float
        Supply (V) and the reference branch resistor (ohm).
    ref : Part
        The diode-connected reference part.
    outputs : sequence of Part
        Output parts; their gates share the reference's gate node ``g``.
    load_voltage : float
        Voltage held at each output drain by a source (V), standing in for the load.
    source_resistor_ohm : float
        Degeneration resistor in every source (0 for none).
    operating_currents : sequence of float, optional
        Reference then output currents of the design; linear-model parts are exported as
        their square-law equivalent exact at these currents (so ngspice sees the same
        operating point).
    title : str
        First line of the deck.
    taken_names : sequence of str
        Model names other cards of the same file already use; the netlist's cards get other names.

    Returns
    -------
    str
        The deck; ``ngspice -b`` prints ``i_ref = ...`` and ``i_out_k = ...`` lines.
    """
    if resistor_ohm <= 0 or supply_v <= 0:
        raise InputError("the sink netlist needs a positive supply and resistor")
    parts = [ref, *outputs]
    currents = list(operating_currents) if operating_currents is not None else [None] * len(parts)
    if len(currents) != len(parts):
        raise InputError("operating_currents needs one value for the reference and one per output")
    # cards in a file beside other cards of the same parts (export spice PARTS --design ID) get their own names:
    # one name, one card per file
    cards = model_cards(parts, at_currents=currents, taken=taken_names, suffix="_op" if taken_names else "")
    rs = float(source_resistor_ohm)
    lines = [f"* {spice_comment(title)}",
             f"* reference {spice_comment(ref.label)}, outputs {spice_comment(', '.join(p.label for p in outputs))}; "
             f"load voltage {_num(load_voltage)} V", f"VSUP vs 0 DC {_num(supply_v)}", f"RREF vs g {_num(resistor_ohm)}"]
    ref_source = "sref" if rs > 0 else "0"
    lines.append(f"MREF g g {ref_source} 0 {cards[0].name} W=1 L=1")
    if rs > 0:
        lines.append(f"RSREF sref 0 {_num(rs)}")
    for k, card in enumerate(cards[1:], start=1):
        source = f"s{k}" if rs > 0 else "0"
        lines.append(f"M{k} d{k} g {source} 0 {card.name} W=1 L=1")
        if rs > 0:
            lines.append(f"RS{k} s{k} 0 {_num(rs)}")
        lines.append(f"VLOAD{k} d{k} 0 DC {_num(load_voltage)}")
    # Only distinct cards (a part may appear once; names are unique already).
    lines.extend(c.text for c in cards)
    # Simulate at the reference's fit temperature, where the cards' TNOM makes them exact.
    lines.append(f".temp {_num(ref.params.temperature_k - 273.15)}")
    lines += [SPICE_OPTIONS, ".op", ".control", "op", "let i_ref = -i(vsup)"]
    names = ["i_ref"]
    for k in range(1, len(cards)):
        lines.append(f"let i_out_{k} = -i(vload{k})")
        names.append(f"i_out_{k}")
    lines += ["print " + " ".join(names) + " v(g)", ".endc", ".end", ""]
    return "\n".join(lines)


def parse_ngspice_print(text: str) -> dict[str, float]:
    """Read ``name = value`` lines that an ngspice ``print`` wrote (e.g. from :func:`sink_netlist`)."""
    out: dict[str, float] = {}
    for match in re.finditer(r"^\s*([A-Za-z_][\w()]*)\s*=\s*([-+0-9.eE]+)\s*$", text, flags=re.MULTILINE):
        try:
            out[match.group(1).lower()] = float(match.group(2))
        except ValueError:
            continue
    return out
