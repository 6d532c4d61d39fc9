"""Self-heating of a sink: each part at its own junction temperature, solved to a steady state.

Each part (reference and outputs, separate packages) sits at T0 + P x Rth, where P is its own
dissipation and Rth its junction-to-ambient thermal resistance (heat sink included). The
electrical operating point depends on those temperatures (``DeviceParams.with_temperature``)
and the dissipations depend on the operating point, so the two are iterated to a fixed point.
When the loop gain exceeds one the iteration runs away: that is the thermal runaway of power
MOSFETs in linear mode below their zero-temperature-coefficient point (Spirito et al., MIEL 2002),
reported as such rather than as a number.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Sequence

import numpy as np

from benchlab.design.mirror import solve_mirror
from benchlab.models import DeviceParams

RUNAWAY_RISE_K = 150.0  # a junction this far above ambient is past any silicon rating: call it runaway


@dataclass(frozen=True)
class SelfHeating:
    """Steady state with self-heating (or ``runaway``); rises in K, currents in A, errors relative."""

    thermal_resistance: float | tuple[float, ...]  # one figure for every part, or one per part (reference first)
    runaway: bool
    iterations: int
    ref_rise: float
    i_ref: float
    output_rise: tuple[float, ...]
    i_out: tuple[float, ...]
    error: tuple[float, ...]

    def to_dict(self) -> dict[str, Any]:
        """Plain-JSON form (SI units)."""
        rth = self.thermal_resistance
        return {"thermal_resistance": list(rth) if isinstance(rth, tuple) else rth, "runaway": self.runaway,
                "iterations": self.iterations, "ref_rise": self.ref_rise, "i_ref": self.i_ref,
                "output_rise": list(self.output_rise), "i_out": list(self.i_out), "error": list(self.error)}


def self_heated_point(supply_v: float, resistor_ohm: float, ref: DeviceParams, outputs: Sequence[DeviceParams],
                      load_voltage: float, thermal_resistance: float | Sequence[float], *,
                      source_resistor_ohm: float = 0.0, vth_tempco: float | Sequence[float] = -5e-3,
                      kp_exponent: float | Sequence[float] = 1.5, max_iterations: int = 400,
                      tol_k: float = 1e-4) -> SelfHeating:
    """Fixed point of dissipation and temperature for every part of the sink.

    Parameters
    ----------
    supply_v, resistor_ohm : float
        The sink's supply and reference resistor.
    ref, outputs : DeviceParams
        Curves at the ambient temperature.
    load_voltage : float
        Voltage across each output (drain to ground).
    thermal_resistance : float or sequence of float
        Junction-to-ambient thermal resistance (K/W), heat sink included: one for every part, or one per part
        (reference first, then the outputs).
    source_resistor_ohm : float
        Degeneration resistor in every source.
    vth_tempco, kp_exponent : float or sequence of float
        Threshold temperature coefficient (V/K) and mobility exponent (KP ~ T^-m), one for all or one per part.
    max_iterations : int
        Iteration limit; not converging within it counts as runaway.
    tol_k : float
        Convergence when no temperature moves by more than this between iterations.

    Returns
    -------
    SelfHeating
    """
    count = 1 + len(outputs)
    rths, tcs, exps = (np.broadcast_to(np.asarray(v, dtype=float), (count,)).tolist()
                       for v in (thermal_resistance, vth_tempco, kp_exponent))
    if not min(rths) > 0:
        raise ValueError("the thermal resistance must be > 0 K/W")
    uniform = len(set(rths)) == 1
    thermal_resistance = rths[0] if uniform else tuple(rths)
    rs = source_resistor_ohm
    rises = [0.0] * (1 + len(outputs))
    point = solve_mirror(supply_v, resistor_ohm, ref, outputs, rs, drain_v=load_voltage)
    for iteration in range(1, max_iterations + 1):
        powers = [point.vgs_ref * point.i_ref]
        powers += [max(load_voltage - i * rs, 0.0) * i for i in point.i_out]
        new = [p * r for p, r in zip(powers, rths)]
        # damped update: the fixed point is the same, and mild loop gains converge without oscillating
        new = [0.5 * (a + b) for a, b in zip(rises, new)]
        moved = max(abs(a - b) for a, b in zip(rises, new))
        rises = new
        if max(rises) > RUNAWAY_RISE_K:
            return _result(thermal_resistance, True, iteration, rises, point)
        hot = [p.with_temperature(p.temperature_k + dt, tc, -m)
               for p, dt, tc, m in zip((ref, *outputs), rises, tcs, exps)]
        point = solve_mirror(supply_v, resistor_ohm, hot[0], hot[1:], rs, drain_v=load_voltage)
        if moved < tol_k:
            return _result(thermal_resistance, False, iteration, rises, point)
    return _result(thermal_resistance, True, max_iterations, rises, point)


def _result(rth, runaway: bool, iterations: int, rises: Sequence[float], point) -> SelfHeating:
    errors = tuple(i / point.i_ref - 1.0 for i in point.i_out)
    return SelfHeating(thermal_resistance=rth, runaway=runaway, iterations=iterations, ref_rise=float(rises[0]),
                       i_ref=point.i_ref, output_rise=tuple(float(r) for r in rises[1:]), i_out=point.i_out,
                       error=errors)
