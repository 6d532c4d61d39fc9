"""Physics of one simulated diode-connected N-channel power MOSFET (gate tied to drain).

Written independently of :mod:`benchlab.models` so that fits of simulated data are not
tautological: this module includes the EKV reverse (drain-side) current, so the current is
exactly zero at 0 V, the temperature laws, a parallel leakage conductance, the body diode
for negative voltage, and the dud behaviours.

Channel current, EKV form (C. C. Enz, F. Krummenacher, E. A. Vittoz, Analog Integrated
Circuits and Signal Processing 8(1) 83-114, 1995): with the pinch-off voltage
VP = (VG - VT) / n, the specific current IS = 2 n beta UT^2 and F(x) = ln^2(1 + e^x),

    ID = IS [F((VP - VS) / 2UT) - F((VP - VD) / 2UT)] / (1 + THETA q),

with VS = 0, VD = VG = V and q = 2 n UT ln(1 + e^((V - VT) / 2nUT)) the forward overdrive
(mobility degradation THETA divides the current, as in SPICE level 3). Here beta = n KP,
so the strong-inversion limit is (KP/2)(V - VT)^2 / (1 + THETA (V - VT)): KP has the
SPICE level-1 meaning (W = L = 1).

Temperature: VT(T) = VT0 + dVT/dT (T - T0), KP(T) = KP0 (T/T0)^-1.5 (the ngspice
level-1 mobility law), UT = kT/q.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass
from typing import Any

from scipy.optimize import brentq

BOLTZMANN_OVER_CHARGE = 8.617333262e-5  # V/K, CODATA 2018
REFERENCE_TEMPERATURE_K = 300.15  # 27 degC, where a part's reference parameters hold

PART_KINDS = ("good", "open", "short", "leaky")


@dataclass(frozen=True)
class PartPhysics:
    """True parameters of one simulated part (invented values, for the demo and for tests).

    Parameters
    ----------
    label : str
        ``Q01`` ...
    kind : str
        ``good``, ``open`` (no conduction), ``short`` (drain shorted to source) or ``leaky``.
    vth_ref : float
        Threshold voltage at ``t_ref_k`` (V).
    kp_ref : float
        Strong-inversion transconductance parameter at ``t_ref_k`` (A/V^2, W = L = 1).
    theta : float
        Mobility degradation (1/V).
    slope_n : float
        Subthreshold slope factor n (>= 1).
    leak_siemens : float
        Conductance in parallel with the channel (S).
    dvth_dt : float
        Threshold temperature coefficient (V/K, negative).
    kp_temp_exponent : float
        KP ~ (T/T0)^exponent.
    rth_k_per_w : float
        Junction-to-ambient thermal resistance (K/W).
    tau_thermal_s : float
        First-order thermal time constant (s).
    short_ohm : float
        Resistance of a shorted part (ohm).
    open_siemens : float
        Residual conductance of an open part (S).
    """

    label: str
    kind: str
    vth_ref: float
    kp_ref: float
    theta: float
    slope_n: float
    leak_siemens: float
    dvth_dt: float
    kp_temp_exponent: float = -1.5
    rth_k_per_w: float = 62.0
    tau_thermal_s: float = 45.0
    t_ref_k: float = REFERENCE_TEMPERATURE_K
    short_ohm: float = 0.02
    open_siemens: float = 1e-12
    body_diode_saturation_a: float = 1e-12

    def __post_init__(self) -> None:
        if self.kind not in PART_KINDS:
            raise ValueError(f"unknown part kind {self.kind!r}")
        if self.slope_n < 1.0 or self.kp_ref <= 0 or self.theta < 0 or self.tau_thermal_s <= 0:
            raise ValueError("slope_n >= 1, kp_ref > 0, theta >= 0 and tau_thermal_s > 0 are required")

    def to_dict(self) -> dict[str, Any]:
        """Plain JSON-ready dict of every parameter."""
        return asdict(self)


def thermal_voltage(temperature_k: float) -> float:
    """kT/q (V)."""
    return BOLTZMANN_OVER_CHARGE * temperature_k


def threshold_at(part: PartPhysics, temperature_k: float) -> float:
    """Threshold voltage at a junction temperature (V)."""
    return part.vth_ref + part.dvth_dt * (temperature_k - part.t_ref_k)


def kp_at(part: PartPhysics, temperature_k: float) -> float:
    """KP at a junction temperature (A/V^2)."""
    return part.kp_ref * (temperature_k / part.t_ref_k) ** part.kp_temp_exponent


def _ln1p_exp(x: float) -> float:
    # ln(1 + e^x), safe for large |x|
    if x > 35.0:
        return x + math.exp(-x)
    return math.log1p(math.exp(x))


def _body_diode_current(part: PartPhysics, volts: float, ut: float) -> float:
    # negative drain voltage forward-biases the body diode (source to drain); ideality 1
    if volts >= 0:
        return 0.0
    exponent = min(-volts / ut, 200.0)
    return -part.body_diode_saturation_a * math.expm1(exponent)


def channel_current(part: PartPhysics, volts: float, temperature_k: float) -> float:
    """EKV channel current of a good part at V = VGS = VDS (A), see module docstring."""
    ut = thermal_voltage(temperature_k)
    n = part.slope_n
    vth = threshold_at(part, temperature_k)
    specific = 2.0 * n * n * kp_at(part, temperature_k) * ut * ut
    forward_log = _ln1p_exp((volts - vth) / (2.0 * n * ut))
    reverse_log = _ln1p_exp(((volts - vth) / n - volts) / (2.0 * ut))
    forward_overdrive = 2.0 * n * ut * forward_log
    return specific * (forward_log ** 2 - reverse_log ** 2) / (1.0 + part.theta * forward_overdrive)


def part_current(part: PartPhysics, volts: float, temperature_k: float) -> float:
    """Current into the drain of the diode-connected part at voltage ``volts`` (A).

    Monotonic in ``volts`` for every kind of part, zero at 0 V.
    """
    if part.kind == "open":
        return part.open_siemens * volts
    if part.kind == "short":
        return volts / part.short_ohm
    ut = thermal_voltage(temperature_k)
    current = part.leak_siemens * volts + _body_diode_current(part, volts, ut)
    if volts > 0:
        current += channel_current(part, volts, temperature_k)
    return current


def voltage_at_current(part: PartPhysics, amps: float, temperature_k: float,
                       ceiling_v: float = 1000.0) -> float:
    """Voltage across the part carrying ``amps`` (inverse of :func:`part_current`).

    Returns ``math.inf`` when even ``ceiling_v`` does not drive that much current (an open part).
    """
    if amps == 0.0:
        return 0.0
    if amps > 0:
        low, high = 0.0, min(1.0, ceiling_v)
        while part_current(part, high, temperature_k) < amps:
            if high >= ceiling_v:
                return math.inf
            low, high = high, min(high * 2.0, ceiling_v)
    else:
        low, high = -1.0, 0.0
        while part_current(part, low, temperature_k) > amps:
            if low <= -ceiling_v:
                return -math.inf
            low = max(low * 2.0, -ceiling_v)
    return brentq(lambda v: part_current(part, v, temperature_k) - amps, low, high,
                  xtol=1e-12, rtol=1e-12, maxiter=200)
