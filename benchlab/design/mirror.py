"""Exact operating point of a MOSFET current sink / mirror (pure functions, scalar and vectorised).

Circuit: the supply feeds a diode-connected reference part through a resistor R; each output
part's gate sits on the reference's gate node. An optional resistor Rs in every source
(degeneration). All solves are exact roots of the two lines, never a rounded hand value.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Sequence

import numpy as np
from scipy.optimize import brentq

from benchlab.design.parts import PartArrays
from benchlab.errors import DesignError
from benchlab.models import DeviceParams, solve_resistor_line


@dataclass(frozen=True)
class MirrorPoint:
    """Operating point: gate node ``vg``, reference ``vgs_ref``/``i_ref``, output currents and VGS."""

    vg: float
    vgs_ref: float
    i_ref: float
    i_out: tuple[float, ...]
    vgs_out: tuple[float, ...]
    regions: tuple[str, ...] = ()


# Laws with a triode form: the SPICE level-1/3 linear region, ID = KP VDS (Vov - VDS/2) / (1 + THETA Vov).
TRIODE_LAWS = ("square", "theta")


def triode_current(params: DeviceParams, vgs: float, vds: float) -> float:
    """Drain current below saturation (0 <= VDS < VGS - Vth) for the square and theta laws.

    Level-1 linear region (ngspice mos1load.c) with the level-3 mobility factor 1/(1 + THETA Vov),
    which meets the saturation law at VDS = Vov.
    """
    vov = vgs - params.vth
    if vov <= 0 or vds <= 0:
        return 0.0
    vds = min(vds, vov)
    theta = params.theta if params.model == "theta" else 0.0
    return params.kp * vds * (vov - 0.5 * vds) / (1.0 + theta * vov)


def _triode_output(params: DeviceParams, gate_v: float, rs: float, drain_v: float, i_sat: float) -> tuple[float, float]:
    # I = ID_triode(VG - I Rs, Vd - I Rs): negative at I = 0, positive at the saturation answer
    def excess(i_d: float) -> float:
        return i_d - triode_current(params, gate_v - i_d * rs, drain_v - i_d * rs)

    if excess(i_sat) <= 0:
        return i_sat, gate_v - i_sat * rs
    i_d = brentq(excess, 0.0, i_sat, xtol=1e-300, rtol=4.5e-15, maxiter=500)
    return float(i_d), gate_v - i_d * rs


def output_in_circuit(params: DeviceParams, gate_v: float, source_resistor_ohm: float = 0.0,
                      drain_v: float | None = None) -> tuple[float, float, str]:
    """Current, VGS and region of an output whose drain sits at ``drain_v`` (None: assume saturation).

    Regions: ``saturation``; ``triode`` (solved with :func:`triode_current`); ``triode-unmodelled``
    for laws without a triode form (linear, ekv), whose current is then the saturation value.
    """
    i_sat, vgs = output_current(params, gate_v, source_resistor_ohm)
    if drain_v is None or i_sat <= 0:
        return i_sat, vgs, "saturation"
    if drain_v - i_sat * source_resistor_ohm >= vgs - params.vth:
        return i_sat, vgs, "saturation"
    if params.model not in TRIODE_LAWS:
        return i_sat, vgs, "triode-unmodelled"
    i_d, vgs_t = _triode_output(params, gate_v, source_resistor_ohm, drain_v, i_sat)
    return i_d, vgs_t, "triode"


def output_current(params: DeviceParams, gate_v: float, source_resistor_ohm: float = 0.0) -> tuple[float, float]:
    """Current and VGS of an output part whose gate is at ``gate_v`` with ``source_resistor_ohm`` in its source.

    Solves VGS(I) + I Rs = VG exactly. Returns ``(i_out, vgs)``.
    """
    if source_resistor_ohm <= 0:
        return float(params.current(gate_v)), float(gate_v)
    # The answer lies between I1 = ID(VG - I0 Rs) and I0 = ID(VG): the source drop is at most I0 Rs.
    hi = float(params.current(gate_v))
    if hi <= 0:
        return 0.0, float(gate_v)
    lo = float(params.current(gate_v - hi * source_resistor_ohm))
    if lo <= 0:
        lo = hi * 1e-200  # hard cut-off laws: any current above zero has its VGS above threshold

    def excess(i_d: float) -> float:
        return float(params.vgs_at(i_d)) + i_d * source_resistor_ohm - gate_v

    if lo >= hi or excess(lo) >= 0:
        return lo, float(params.vgs_at(lo))
    # relative tolerance only: in weak inversion an absolute one would be coarse against the current
    i_d = brentq(excess, lo, hi, xtol=1e-300, rtol=4.5e-15, maxiter=500)
    return float(i_d), float(params.vgs_at(i_d))


def solve_mirror(supply_v: float, resistor_ohm: float, ref: DeviceParams, outputs: Sequence[DeviceParams],
                 source_resistor_ohm: float = 0.0, drain_v: float | None = None) -> MirrorPoint:
    """Operating point of the whole sink for a given supply and resistor.

    Parameters
    ----------
    supply_v : float
        Supply feeding the reference branch (V).
    resistor_ohm : float
        Reference branch resistor (ohm).
    ref : DeviceParams
        Reference part (diode-connected).
    outputs : sequence of DeviceParams
        Output parts, gates on the reference gate node.
    source_resistor_ohm : float
        Degeneration resistor in every source (ohm), 0 for none.
    drain_v : float, optional
        Voltage at every output drain; when given, outputs below saturation are solved in their
        triode region (see :func:`output_in_circuit`), else saturation is assumed.

    Returns
    -------
    MirrorPoint
    """
    if supply_v <= 0:
        raise DesignError(f"the supply must be positive, got {supply_v} V")
    if resistor_ohm <= 0:
        raise DesignError(f"the resistor must be positive, got {resistor_ohm} ohm")
    vgs_ref, i_ref = solve_resistor_line(ref, supply_v, resistor_ohm, source_resistor_ohm)
    vg = vgs_ref + i_ref * source_resistor_ohm
    solved = [output_in_circuit(p, vg, source_resistor_ohm, drain_v) for p in outputs]
    return MirrorPoint(vg=vg, vgs_ref=vgs_ref, i_ref=i_ref, i_out=tuple(s[0] for s in solved),
                       vgs_out=tuple(s[1] for s in solved), regions=tuple(s[2] for s in solved))


def resistor_for_current(supply_v: float, target_a: float, ref: DeviceParams,
                         source_resistor_ohm: float = 0.0) -> tuple[float, float]:
    """Exact resistor that sets ``target_a`` in the reference: R = (Vs - VGS(I) - I Rs) / I.

    Returns ``(r_exact, vgs)``; a :class:`DesignError` when the supply cannot reach the current.
    """
    if not target_a > 0:
        raise DesignError(f"the target current must be positive, got {target_a} A")
    vgs = float(ref.vgs_at(target_a))
    headroom = supply_v - vgs - target_a * source_resistor_ohm
    if headroom <= 0:
        raise DesignError(f"a {supply_v:g} V supply cannot drive {target_a:g} A: the reference alone needs "
                          f"{vgs + target_a * source_resistor_ohm:.3f} V at that current")
    return headroom / target_a, vgs


def _bisect(func, lo, hi, iterations: int = 90):
    # vectorised bisection for a function decreasing in x on [lo, hi] (root where func crosses 0)
    lo = np.array(lo, dtype=float)
    hi = np.array(hi, dtype=float)
    for _ in range(iterations):
        mid = 0.5 * (lo + hi)
        positive = func(mid) > 0
        lo = np.where(positive, mid, lo)
        hi = np.where(positive, hi, mid)
    return 0.5 * (lo + hi)


def solve_mirror_batch(supply_v: float, resistor_ohm, ref: PartArrays, outputs: Sequence[PartArrays],
                       source_resistor_ohm=None) -> tuple[np.ndarray, np.ndarray, list[np.ndarray]]:
    """Vectorised :func:`solve_mirror` over samples (Monte Carlo).

    ``resistor_ohm`` has one entry per sample; ``ref`` and each element of ``outputs`` hold one
    parameter set per sample; ``source_resistor_ohm`` is None or an array of shape
    (samples, 1 + outputs). Returns ``(vg, i_ref, [i_out per output])``.
    """
    resistor_ohm = np.asarray(resistor_ohm, dtype=float)
    samples = resistor_ohm.shape[0]
    rs = np.zeros((samples, 1 + len(outputs))) if source_resistor_ohm is None else np.asarray(source_resistor_ohm)
    total = resistor_ohm + rs[:, 0]
    i_ref = _bisect(lambda i: supply_v - i * total - ref.vgs_at(np.maximum(i, 1e-300)),
                    np.zeros(samples), supply_v / total)
    vg = ref.vgs_at(i_ref) + i_ref * rs[:, 0]
    currents = []
    for k, out in enumerate(outputs, start=1):
        rs_k = rs[:, k]
        if not np.any(rs_k > 0):
            currents.append(out.current(vg))
            continue
        hi = np.where(rs_k > 0, np.maximum(vg, 0.0) / np.where(rs_k > 0, rs_k, 1.0), 0.0) + 1e-300
        solved = _bisect(lambda i: vg - out.vgs_at(np.maximum(i, 1e-300)) - i * rs_k, np.zeros(samples), hi)
        currents.append(np.where(rs_k > 0, solved, out.current(vg)))
    return vg, i_ref, currents
