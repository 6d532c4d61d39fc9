"""The virtual fixture: the circuit around the part, solved exactly, and the part's temperature.

``resistor`` fixture: supply (+) -> series resistor -> drain = gate of the part -> source -> 0 V;
the meter's volts function reads across the part, its amps function the branch current.
The supply is an ideal CV/CC source: constant voltage at (setpoint with a small gain and
offset error) until the branch current would pass the current limit, then constant current
at the limit. ``smu`` fixture: the SMU straight across the part, forcing volts (current
compliance) or amps (voltage compliance). Instruments of the other fixture see an open circuit.

The part sits on a fixture block (a heated block or a chamber) whose temperature T_b follows its
setpoint with its own time constant: dT_b/dt = (T_set - T_b) / tau_b (T_set starts at the ambient).
Junction temperature follows dT/dt = (T_b + P Rth - T) / tau on the virtual clock, with P = V I of
the part recomputed along the way (exact exponential steps of at most min(tau, tau_b)/20). A
thermistor on the block is the simulated temperature sensor.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace

from scipy.optimize import brentq

from benchlab.sim.physics import PartPhysics, part_current, voltage_at_current

FIXTURES = ("resistor", "smu")
# The simulated block sensor: an NTC thermistor, 10 kohm at 25 degC, B = 3950 K (typical catalogue values,
# common practice), read through the B-parameter equation R = R25 exp(B (1/T - 1/T25)).
THERMISTOR_R25_OHM = 10_000.0
THERMISTOR_T25_K = 298.15
THERMISTOR_BETA_K = 3950.0


def thermistor_ohm(temperature_k: float) -> float:
    """Resistance of the simulated block thermistor at ``temperature_k`` (B-parameter equation)."""
    return THERMISTOR_R25_OHM * math.exp(THERMISTOR_BETA_K * (1.0 / temperature_k - 1.0 / THERMISTOR_T25_K))


@dataclass(frozen=True)
class SupplyError:
    """Setpoint error of the supply output: V_out = V_set (1 + gain) + offset (clipped at 0)."""

    gain: float = 0.0
    offset_v: float = 0.0

    def actual(self, setpoint_v: float) -> float:
        """The real output voltage for a setpoint (V)."""
        if setpoint_v <= 0:
            return 0.0
        return max(0.0, setpoint_v * (1.0 + self.gain) + self.offset_v)


@dataclass
class SourceState:
    """Everything the two sources are set to (mutated by the instruments, under the bench lock)."""

    supply_on: bool = False
    supply_v: float = 0.0
    supply_i_limit: float = 0.1
    smu_on: bool = False
    smu_function: str = "VOLTAGE"  # what the SMU forces: VOLTAGE or CURRENT
    smu_level_v: float = 0.0
    smu_level_i: float = 0.0
    smu_i_compliance: float = 0.1
    smu_v_compliance: float = 20.0


@dataclass(frozen=True)
class OperatingPoint:
    """The solved circuit: voltage across and current through the part, and what each source sees."""

    part_v: float = 0.0
    part_i: float = 0.0
    supply_v: float = 0.0
    supply_i: float = 0.0
    supply_mode: str = "OFF"  # CV, CC or OFF
    smu_v: float = 0.0
    smu_i: float = 0.0
    smu_tripped: bool = False

    @property
    def part_power_w(self) -> float:
        """Power dissipated in the part (W)."""
        return self.part_v * self.part_i


def solve_resistor_fixture(part: PartPhysics | None, temperature_k: float, supply_v: float,
                           i_limit: float, resistor_ohm: float) -> OperatingPoint:
    """Exact operating point of supply -> resistor -> part with the supply on.

    Parameters
    ----------
    part : PartPhysics or None
        None for an empty fixture (open circuit).
    supply_v : float
        Actual (not nominal) supply output voltage in CV (V).
    i_limit : float
        Supply current limit (A).
    resistor_ohm : float
        Actual series resistance (ohm).
    """
    if part is None or supply_v <= 0:
        return OperatingPoint(part_v=supply_v, supply_v=supply_v, supply_mode="CV")
    # CV: (Vs - V) / R = I(V); the left side falls and the right side rises with V
    v_cv = brentq(lambda v: (supply_v - v) / resistor_ohm - part_current(part, v, temperature_k),
                  0.0, supply_v, xtol=1e-13, rtol=1e-13, maxiter=200)
    i_cv = (supply_v - v_cv) / resistor_ohm
    if i_cv <= i_limit:
        return OperatingPoint(part_v=v_cv, part_i=i_cv, supply_v=supply_v, supply_i=i_cv, supply_mode="CV")
    v_cc = voltage_at_current(part, i_limit, temperature_k, ceiling_v=supply_v) if i_limit > 0 else 0.0
    return OperatingPoint(part_v=v_cc, part_i=i_limit, supply_v=v_cc + i_limit * resistor_ohm,
                          supply_i=i_limit, supply_mode="CC")


def solve_smu_fixture(part: PartPhysics | None, temperature_k: float, state: SourceState) -> OperatingPoint:
    """Exact operating point of the SMU forcing volts or amps straight across the part (output on)."""
    if state.smu_function == "VOLTAGE":
        volts = state.smu_level_v
        amps = part_current(part, volts, temperature_k) if part is not None else 0.0
        if amps > state.smu_i_compliance:
            amps = state.smu_i_compliance
            volts = voltage_at_current(part, amps, temperature_k, ceiling_v=volts)  # type: ignore[arg-type]
            return OperatingPoint(part_v=volts, part_i=amps, smu_v=volts, smu_i=amps, smu_tripped=True)
        return OperatingPoint(part_v=volts, part_i=amps, smu_v=volts, smu_i=amps)
    amps = state.smu_level_i
    volts = voltage_at_current(part, amps, temperature_k) if part is not None else math.inf
    if volts > state.smu_v_compliance:
        volts = state.smu_v_compliance
        amps = part_current(part, volts, temperature_k) if part is not None else 0.0
        return OperatingPoint(part_v=volts, part_i=amps, smu_v=volts, smu_i=amps, smu_tripped=True)
    return OperatingPoint(part_v=volts, part_i=amps, smu_v=volts, smu_i=amps)


class Fixture:
    """The part under test in its fixture, with its junction temperature on the virtual clock.

    Parameters
    ----------
    kind : str
        ``resistor`` or ``smu``.
    resistor_ohm : float
        Actual series resistance (the nominal one is what the user believes).
    supply_error : SupplyError
        Supply setpoint error.
    ambient_k : float
        Ambient temperature (K); the block starts there and is set there until told otherwise.
    tau_block_s : float
        Time constant of the fixture block following its setpoint (s).
    """

    def __init__(self, kind: str, resistor_ohm: float, supply_error: SupplyError, ambient_k: float,
                 tau_block_s: float = 120.0):
        if kind not in FIXTURES:
            raise ValueError(f"unknown fixture {kind!r}")
        self.kind = kind
        self.resistor_ohm = resistor_ohm
        self.supply_error = supply_error
        self.ambient_k = ambient_k
        self.sources = SourceState()
        self.part: PartPhysics | None = None
        self.temperature_k = ambient_k
        self.block_k = ambient_k
        self.block_setpoint_k = ambient_k
        self.tau_block_s = tau_block_s
        self._thermal_time = 0.0

    def load(self, part: PartPhysics | None, now: float) -> None:
        """Put a part (or nothing) in the fixture; it starts at the block's temperature."""
        self.advance(now)
        self.part = part
        self.temperature_k = self.block_k
        self._thermal_time = now

    def set_block(self, setpoint_k: float, now: float) -> None:
        """Give the fixture block a new temperature setpoint (it moves there with ``tau_block_s``)."""
        self.advance(now)
        self.block_setpoint_k = setpoint_k

    def _move_block(self, dt: float) -> None:
        self.block_k = self.block_setpoint_k + (self.block_k - self.block_setpoint_k) * math.exp(-dt / self.tau_block_s)

    def fail(self, kind: str, now: float) -> None:
        """The part in the fixture fails ``open`` or ``short`` from now on."""
        self.advance(now)
        if self.part is not None:
            self.part = replace(self.part, kind=kind)

    def operating_point(self, temperature_k: float | None = None) -> OperatingPoint:
        """Solve the circuit for the present source settings (at the present temperature)."""
        temp = self.temperature_k if temperature_k is None else temperature_k
        state = self.sources
        point = OperatingPoint()
        if self.kind == "resistor":
            if state.supply_on:
                point = solve_resistor_fixture(self.part, temp, self.supply_error.actual(state.supply_v),
                                               state.supply_i_limit, self.resistor_ohm)
            smu = self._smu_open_circuit()
            return replace(point, smu_v=smu.smu_v, smu_i=smu.smu_i, smu_tripped=smu.smu_tripped)
        if state.smu_on:
            point = solve_smu_fixture(self.part, temp, state)
        if state.supply_on:  # supply unconnected in the smu fixture
            point = replace(point, supply_v=self.supply_error.actual(state.supply_v), supply_mode="CV")
        return point

    def _smu_open_circuit(self) -> OperatingPoint:
        state = self.sources
        if not state.smu_on:
            return OperatingPoint()
        if state.smu_function == "VOLTAGE":
            return OperatingPoint(smu_v=state.smu_level_v)
        if state.smu_level_i == 0:
            return OperatingPoint()
        return OperatingPoint(smu_v=state.smu_v_compliance, smu_tripped=True)

    def advance(self, now: float) -> None:
        """Integrate the block and junction temperatures up to virtual time ``now``."""
        elapsed = now - self._thermal_time
        if elapsed <= 0:
            return
        self._thermal_time = now
        powered = self.sources.supply_on if self.kind == "resistor" else self.sources.smu_on
        block_still = abs(self.block_k - self.block_setpoint_k) < 1e-9
        if self.part is None or (not powered and block_still):
            self._move_block(elapsed)
            if self.part is not None:  # exact: a constant target
                decay = math.exp(-elapsed / self.part.tau_thermal_s)
                self.temperature_k = self.block_k + (self.temperature_k - self.block_k) * decay
            return
        tau = self.part.tau_thermal_s
        rth = self.part.rth_k_per_w
        scale = tau if block_still else min(tau, self.tau_block_s)
        steps = min(400 if powered else 4000, max(1, math.ceil(elapsed / (scale / 20.0))))
        step = elapsed / steps
        for _ in range(steps):
            self._move_block(step / 2.0)  # the block at the middle of the step drives the junction
            power = max(0.0, self.operating_point().part_power_w) if powered else 0.0
            steady = self.block_k + power * rth
            self.temperature_k = steady + (self.temperature_k - steady) * math.exp(-step / tau)
            self._move_block(step / 2.0)
