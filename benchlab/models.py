"""Drain-current models of a diode-connected MOSFET (VDS = VGS, so always saturated above threshold).

Shared, pure functions: the fitter (``benchlab.extract``), the device library and the
sink designer (``benchlab.design``) all evaluate parts through this one module, so a
part's fitted curve means the same thing everywhere. Everything is vectorised over
VGS or ID with numpy and works with scalars too.

Models (trade symbols; our names in code):

- ``linear``: ID = gm (VGS - Vth), the rule-of-thumb line near one operating point
  (velocity-saturated devices; Streetman & Banerjee, Solid State Electronic Devices, eq. 6-60).
- ``square``: ID = (KP/2)(VGS - Vth)^2, SPICE level-1 saturation with W = L = 1.
- ``theta``: ID = (KP/2)(VGS - Vth)^2 / (1 + THETA (VGS - Vth)), mobility degradation /
  series resistance (SPICE level-3 style THETA).
- ``ekv``: weak-to-strong inversion interpolation (Enz, Krummenacher, Vittoz, Analog Integrated
  Circuits and Signal Processing 8(1) 83-114, 1995): the overdrive is replaced by the smooth
  q = 2 n UT ln(1 + exp(Vov / (2 n UT))), then ID = (KP/2) q^2 / (1 + THETA q). In strong
  inversion q -> Vov (the theta law); in weak inversion ID ~ exp(Vov / (n UT)).
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from typing import Any

import numpy as np

from benchlab.choices import MODEL_NAMES

BOLTZMANN_OVER_Q = 8.617333262e-5  # V/K (CODATA 2018 k/e)
T_NOMINAL_K = 300.15  # 27 degC, SPICE's default TNOM


def thermal_voltage(temperature_k: float = T_NOMINAL_K) -> float:
    """kT/q in volts (25.87 mV at 300.15 K)."""
    return BOLTZMANN_OVER_Q * temperature_k


def _softplus(x):
    # ln(1 + e^x) without overflow for large x or loss of precision for very negative x
    x = np.asarray(x, dtype=float)
    return np.logaddexp(0.0, x)


def _softplus_inverse(y):
    # x such that ln(1 + e^x) = y, for y > 0: x = y + ln(1 - e^-y)
    y = np.asarray(y, dtype=float)
    with np.errstate(divide="ignore"):
        return y + np.log(-np.expm1(-y))


def effective_overdrive(vgs, vth, n: float = 0.0, ut: float = thermal_voltage()):
    """Overdrive used by the strong-inversion laws.

    With ``n == 0`` this is max(VGS - Vth, 0) (hard cut-off); with a slope factor
    ``n > 0`` it is the EKV interpolation q = 2 n UT ln(1 + exp(Vov / (2 n UT))).
    """
    vov = np.asarray(vgs, dtype=float) - vth
    if n <= 0:
        return np.maximum(vov, 0.0)
    scale = 2.0 * n * ut
    return scale * _softplus(vov / scale)


def saturation_current(vgs, vth: float, kp: float, theta: float = 0.0, n: float = 0.0,
                       ut: float = thermal_voltage()):
    """Drain current of the square / theta / EKV laws (A), see module docstring."""
    q = effective_overdrive(vgs, vth, n, ut)
    return 0.5 * kp * q * q / (1.0 + theta * q)


def linear_current(vgs, vth: float, gm: float):
    """ID = gm (VGS - Vth) above threshold, 0 below (A)."""
    return gm * np.maximum(np.asarray(vgs, dtype=float) - vth, 0.0)


def overdrive_at_current(i_d, kp: float, theta: float = 0.0):
    """Invert ID = (KP/2) q^2 / (1 + THETA q) for q >= 0 (exact quadratic root)."""
    i_d = np.asarray(i_d, dtype=float)
    return (i_d * theta + np.sqrt((i_d * theta) ** 2 + 2.0 * kp * i_d)) / kp


@dataclass(frozen=True)
class DeviceParams:
    """A part's fitted (or hand-entered) curve; reduces to plain JSON with :meth:`to_dict`.

    Parameters
    ----------
    model : str
        One of ``linear``, ``square``, ``theta``, ``ekv``.
    vth : float
        Threshold voltage (V).
    kp : float
        Transconductance parameter KP (A/V^2, SPICE level-1 convention, W = L = 1);
        unused by ``linear``.
    theta : float
        Mobility-degradation / series-resistance factor THETA (1/V).
    n : float
        Subthreshold slope factor (``ekv`` only; 0 otherwise).
    gm : float
        Transconductance of the ``linear`` model (A/V).
    temperature_k : float
        Temperature the parameters hold at (K).
    """

    model: str
    vth: float
    kp: float = 0.0
    theta: float = 0.0
    n: float = 0.0
    gm: float = 0.0
    temperature_k: float = T_NOMINAL_K

    def __post_init__(self) -> None:
        if self.model not in MODEL_NAMES:
            raise ValueError(f"unknown model '{self.model}' (expected one of {', '.join(MODEL_NAMES)})")
        if self.model == "linear":
            if not self.gm > 0:
                raise ValueError("the linear model needs gm > 0")
        elif not self.kp > 0:
            raise ValueError(f"the {self.model} model needs KP > 0")
        if self.theta < 0:
            raise ValueError("THETA must be >= 0")
        if self.model == "ekv" and not self.n >= 1.0:
            raise ValueError("the ekv model needs a slope factor n >= 1")

    @property
    def ut(self) -> float:
        return thermal_voltage(self.temperature_k)

    def current(self, vgs):
        """Drain current (A) at gate-source voltage ``vgs`` (V), VDS = VGS."""
        if self.model == "linear":
            return linear_current(vgs, self.vth, self.gm)
        n = self.n if self.model == "ekv" else 0.0
        theta = self.theta if self.model in ("theta", "ekv") else 0.0
        return saturation_current(vgs, self.vth, self.kp, theta, n, self.ut)

    def vgs_at(self, i_d):
        """VGS (V) at which the part carries ``i_d`` (A > 0): the inverse a mirror design needs."""
        i_d = np.asarray(i_d, dtype=float)
        if self.model == "linear":
            return self.vth + i_d / self.gm
        theta = self.theta if self.model in ("theta", "ekv") else 0.0
        q = overdrive_at_current(i_d, self.kp, theta)
        if self.model != "ekv":
            return self.vth + q
        scale = 2.0 * self.n * self.ut
        return self.vth + scale * _softplus_inverse(q / scale)

    def gm_at_vgs(self, vgs):
        """Small-signal transconductance dID/dVGS (A/V) at ``vgs``."""
        vgs = np.asarray(vgs, dtype=float)
        if self.model == "linear":
            return np.where(vgs > self.vth, self.gm, 0.0)
        theta = self.theta if self.model in ("theta", "ekv") else 0.0
        n = self.n if self.model == "ekv" else 0.0
        q = effective_overdrive(vgs, self.vth, n, self.ut)
        did_dq = 0.5 * self.kp * q * (2.0 + theta * q) / (1.0 + theta * q) ** 2
        if n <= 0:
            dq_dvov = (vgs > self.vth).astype(float)
        else:
            dq_dvov = 1.0 / (1.0 + np.exp(-(vgs - self.vth) / (2.0 * n * self.ut)))
        return did_dq * dq_dvov

    def gm_at(self, i_d):
        """Transconductance (A/V) at drain current ``i_d`` (A)."""
        return self.gm_at_vgs(self.vgs_at(i_d))

    def with_temperature(self, temperature_k: float, vth_tempco: float = -5e-3,
                         kp_exponent: float = -1.5) -> "DeviceParams":
        """The same part at another temperature.

        Threshold moves by ``vth_tempco`` V/K (datasheets span about -2 to -8 mV/K;
        -5 mV/K is a middle value, from memory) and KP scales as (T/T0)^kp_exponent
        (the SPICE level-1 mobility law, exponent -1.5).
        """
        dt = temperature_k - self.temperature_k
        ratio = (temperature_k / self.temperature_k) ** kp_exponent
        return replace(self, vth=self.vth + vth_tempco * dt, kp=self.kp * ratio, gm=self.gm * ratio,
                       temperature_k=temperature_k)

    def to_dict(self) -> dict[str, Any]:
        # the fields are plain scalars: no deep copy needed (asdict's is most of the JSON output's time)
        return {"model": self.model, "vth": self.vth, "kp": self.kp, "theta": self.theta, "n": self.n,
                "gm": self.gm, "temperature_k": self.temperature_k}

    @classmethod
    def from_dict(cls, data: dict[str, Any]) -> "DeviceParams":
        known = {f for f in cls.__dataclass_fields__}
        # null stands for "not a parameter of this model" (plain data never carries a placeholder 0)
        return cls(**{k: v for k, v in data.items() if k in known and (v is not None or k in ("model", "vth"))})


def solve_resistor_line(params: DeviceParams, supply_v: float, resistor_ohm: float,
                        source_resistor_ohm: float = 0.0, tol: float = 1e-12) -> tuple[float, float]:
    """Operating point of a diode-connected part fed from ``supply_v`` through ``resistor_ohm``.

    Solves (Vs - VG) / R = ID(VGS) with VG = VGS + ID Rs exactly (bracketed root, no
    rounding of the intermediate voltage). Returns ``(vgs, i_d)``.
    """
    from scipy.optimize import brentq

    if resistor_ohm <= 0:
        raise ValueError("the series resistor must be > 0 ohm")
    if supply_v <= 0:
        return 0.0, 0.0

    def mismatch(i_d: float) -> float:
        # current that the resistor line allows at the VGS the part needs for i_d, minus i_d
        vgs = float(params.vgs_at(i_d))
        return (supply_v - vgs - i_d * source_resistor_ohm) / resistor_ohm - i_d

    i_max = supply_v / resistor_ohm
    lo = min(1e-18, i_max * 1e-12)
    if mismatch(lo) <= 0:
        return float(params.vgs_at(lo)), lo
    i_d = brentq(mismatch, lo, i_max, xtol=tol * 1e-3, rtol=8.9e-16, maxiter=500)
    return float(params.vgs_at(i_d)), float(i_d)


def ztc_crossing(cold: "DeviceParams", hot: "DeviceParams", search_v: float = 12.0) -> tuple[float, float] | None:
    """VGS and ID (V, A) where the fitted curves of a cold and a hot part cross above threshold, or None.

    Below the crossing the hot curve carries more current (threshold term), above it less (mobility term):
    the zero-temperature-coefficient point (Spirito et al., MIEL 2002). Searched up to ``search_v`` above threshold.
    """
    from scipy.optimize import brentq

    low = max(cold.vth, hot.vth) + 1e-3
    grid = np.linspace(low, low + search_v, 1201)
    diff = np.asarray(hot.current(grid), dtype=float) - np.asarray(cold.current(grid), dtype=float)
    sign_change = np.nonzero((diff[:-1] > 0) & (diff[1:] <= 0))[0]
    if sign_change.size == 0:
        return None
    k = int(sign_change[0])
    vgs = brentq(lambda v: float(hot.current(v)) - float(cold.current(v)), grid[k], grid[k + 1], xtol=1e-9)
    return float(vgs), float(cold.current(vgs))
