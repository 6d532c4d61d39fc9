"""The forced currents of the thermal-resistance measurement, on either fixture, behind the safety guard.

The electrical method (JEDEC JESD51-1) needs the part's VGS at a known current: a small constant sense
current (the temperature-sensitive parameter), a heating current, and a fast switch from one to the other.

- SMU fixture (:class:`SmuCurrents`): the source-measure unit forces the current and measures VGS.
- Resistor fixture (:class:`SupplyCurrents`): supply -> series resistor -> diode-connected part, meter across
  the part. The supply's current limit is the forced current: its voltage is set a margin above what the
  part and the resistor need at that current, so the supply regulates in constant current and the drain
  current is the limit whatever the junction temperature (a constant voltage through the resistor would let
  a small sense current grow several-fold as the junction warms, since the part is then near threshold).
  Heating and sensing are both "drop / raise the limit, then the voltage". Every reading checks from the
  supply's voltage readback and the resistor drop that the supply really is at its limit.

Both refuse to switch the output on once the run is cancelled (an abort that switched it off from outside
is never undone) and log every reading.
"""

from __future__ import annotations

import math
from abc import ABC, abstractmethod
from typing import Any

import numpy as np

from benchlab.errors import InputError, InstrumentError, SweepCancelled
from benchlab.kinds import Fixture
from benchlab.sweep.plan import Limits
from benchlab.sweep.safety import GuardedSmu, GuardedSupply

SUPPLY_MARGIN_V = 0.5  # supply voltage above what the part and the resistor need at the forced current (V)
SUPPLY_VGS_MARGIN = 0.1  # ... plus this fraction of the expected VGS
UNKNOWN_VGS_V = 8.0  # VGS assumed before the first reading (a supply in constant current leaves the rest unused)
IN_CC = 0.8  # the resistor-drop current must reach this fraction of the limit (else not regulating; the slack
# covers a coarse voltage readback)


def check_cancel(cancel) -> None:
    """Raise :class:`SweepCancelled` once ``cancel`` is set."""
    if cancel is not None and cancel.is_set():
        raise SweepCancelled("cancelled; the output is off")


class _Currents(ABC):
    """What both fixtures share: sense readings, pulses, the log."""

    def __init__(self, plan, clock, log, cancel, limits: Limits):
        self.plan, self.clock, self.log, self.cancel, self.limits = plan, clock, log, cancel, limits

    # -- per fixture -------------------------------------------------------------------------------------
    @abstractmethod
    def force(self, amps: float, expect_vgs: float | None = None) -> None:
        """Make ``amps`` flow through the part (output state unchanged)."""

    @abstractmethod
    def measure(self) -> tuple[float, float]:
        """One reading: (VGS, drain current)."""

    @abstractmethod
    def set_output(self, on: bool) -> None:
        """Switch the forcing source's output."""

    @abstractmethod
    def safe_off(self) -> list[str]:
        """Output off and setpoints to zero; returns what could not be done."""

    def max_current(self, expect_vgs: float) -> float:
        """The largest current this bench can force with the part at ``expect_vgs`` (A)."""
        return self.limits.max_drain_a

    # -- shared --------------------------------------------------------------------------------------------
    def on(self) -> None:
        check_cancel(self.cancel)
        self.set_output(True)

    def read(self, what: str, **extra) -> tuple[float, float]:
        check_cancel(self.cancel)
        volts, amps = self.measure()
        self.log.add("reading", what=what, t_s=self.clock.now(), vgs=volts, id=amps, **extra)
        return volts, amps

    def sense(self, count: int, what: str) -> tuple[float, float]:
        """Mean and standard error of ``count`` VGS readings at the sense current (output on only meanwhile)."""
        check_cancel(self.cancel)
        self.force(self.plan.sense_current_a)
        self.on()
        try:
            self.clock.wait(0.05)
            values = [self.read(what)[0] for _ in range(count)]
        finally:
            self.set_output(False)
        return float(np.mean(values)), float(np.std(values, ddof=1) / math.sqrt(count))

    def pulse(self, amps: float, expect_vgs: float, what: str) -> float:
        """VGS at ``amps`` from one short pulse (output on for one reading), then a pause with the output off."""
        check_cancel(self.cancel)
        self.force(amps, expect_vgs)
        self.on()
        try:
            volts = self.read(what, pulsed=True)[0]
        finally:
            self.set_output(False)
            self.force(0.0)
        self.clock.wait(self.plan.off_s)
        return volts


class SmuCurrents(_Currents):
    """The SMU forcing current (voltage compliance at ``max_supply_v``)."""

    def __init__(self, bench: Any, limits: Limits, plan, clock, log, cancel):
        super().__init__(plan, clock, log, cancel, limits)
        self.smu = GuardedSmu(bench.smu, limits, clock.now)
        self.smu.safe_off()
        self.smu.configure_source("current", limits.max_supply_v)
        self.smu.set_nplc(plan.nplc)

    def force(self, amps: float, expect_vgs: float | None = None) -> None:
        self.smu.set_level(amps, expect_vgs)

    def measure(self) -> tuple[float, float]:
        volts, amps = self.smu.measure()
        if not (math.isfinite(volts) and abs(volts) < 1e30) or self.smu.in_compliance():
            raise InstrumentError("the source-measure unit reached its voltage compliance (is the part open or "
                                  "not seated?)")
        return volts, amps

    def set_output(self, on: bool) -> None:
        self.smu.set_output(on)

    def safe_off(self) -> list[str]:
        return self.smu.safe_off()


class SupplyCurrents(_Currents):
    """The supply's current limit forcing current through the series resistor; the meter reads VGS."""

    def __init__(self, bench: Any, limits: Limits, plan, clock, log, cancel, resistor_ohm: float,
                 tolerance: float):
        super().__init__(plan, clock, log, cancel, limits)
        self.r_nominal = float(resistor_ohm)
        self.r_high = resistor_ohm * (1.0 + tolerance)  # the supply voltage must cover the largest the resistor may be
        self.supply = GuardedSupply(bench.supply, limits, resistor_ohm * (1.0 - tolerance), clock.now)
        self.meter = bench.meter
        self.supply.safe_off()
        self.meter.configure_voltage(None, plan.nplc)
        self.expect_vgs = 0.0

    def max_current(self, expect_vgs: float) -> float:
        """Within ``max_drain_a`` and what ``max_supply_v`` can drive through the resistor at this VGS."""
        room = self.limits.max_supply_v - expect_vgs * (1.0 + SUPPLY_VGS_MARGIN) - SUPPLY_MARGIN_V
        return max(0.0, min(self.limits.max_drain_a, room / self.r_high * (1.0 - 1e-6)))  # a hair under: rounding

    def force(self, amps: float, expect_vgs: float | None = None) -> None:
        if amps <= 0:
            self.supply.set_voltage(0.0)
            return
        if expect_vgs is None:
            expect_vgs = self.expect_vgs or UNKNOWN_VGS_V
        volts = expect_vgs * (1.0 + SUPPLY_VGS_MARGIN) + amps * self.r_high + SUPPLY_MARGIN_V
        if not self.expect_vgs:  # the first (sense) reading: whatever the part needs, within the limit
            volts = min(volts, self.limits.max_supply_v)
        if volts > self.limits.max_supply_v:
            raise InputError(f"forcing {amps:.3g} A through the {self.r_nominal:g} ohm resistor needs "
                             f"{volts:.3g} V, above limits.max_supply_v {self.limits.max_supply_v:g} V")
        # the limit first: going down the current drops at once (the switch to the sense current), going up the
        # guard's worst case for the new voltage is judged with the new limit
        # in constant current the drain current is the limit, at the part's VGS: the guard checks that prediction
        # (as the sweep engine's predictions), the heating loop the measured power
        self.supply.set_current_limit(amps)
        self.supply.set_voltage(volts, expect_id=amps, expect_vgs=expect_vgs * (1.0 + SUPPLY_VGS_MARGIN))

    def measure(self) -> tuple[float, float]:
        vgs = float(self.meter.read())
        supply_v = float(self.supply.measure_voltage())
        amps = (supply_v - vgs) / self.r_nominal
        limit = self.supply.current_limit_a or 0.0
        if not (math.isfinite(vgs) and abs(vgs) < 1e30) or amps < 0.1 * limit:
            raise InstrumentError("almost no current flows: the meter reads nearly the whole supply voltage across "
                                  "the part (is it open or not seated?)")
        if amps < IN_CC * limit:
            raise InstrumentError(f"the supply is not regulating its current at {limit * 1e3:.3g} mA (the resistor "
                                  f"drop gives {amps * 1e3:.3g} mA): a supply whose current limit is this coarse "
                                  "needs a larger sense current")
        self.expect_vgs = vgs
        return vgs, limit  # in constant current the drain current is the limit (the drop above only checks it)

    def set_output(self, on: bool) -> None:
        self.supply.set_output(on)

    def safe_off(self) -> list[str]:
        return self.supply.safe_off()


def forced_currents(bench: Any, limits: Limits, plan, clock, log, cancel) -> _Currents:
    """The forced-current source of this bench's fixture (nothing is switched on)."""
    config = bench.config
    if config.fixture == Fixture.SMU:
        return SmuCurrents(bench, limits, plan, clock, log, cancel)
    if config.fixture == Fixture.RESISTOR:
        return SupplyCurrents(bench, limits, plan, clock, log, cancel, float(config.series_resistor_ohm),
                              float(config.series_resistor_tolerance or 0.0))
    raise InputError(f"the thermal-resistance measurement does not know the fixture '{config.fixture}'")


__all__ = ["SmuCurrents", "SupplyCurrents", "check_cancel", "forced_currents"]
