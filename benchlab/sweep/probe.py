"""A harmless probe of the fixture: is a part seated (conducting) or is the fixture open?

Hands-free characterization polls the fixture between sweeps: the supply at a few volts with a
1 mA current limit through the series resistor (the meter reads the volts across the part), or
the SMU forcing a few volts with a 1 mA compliance. A seated diode-connected part clamps the volts
at about its threshold and carries the limited current; an empty fixture (or an open part) does
not. The limit is set before the output goes on and every setpoint goes through the safety guard.
"""

from __future__ import annotations

import time
from dataclasses import dataclass

from benchlab.kinds import Fixture, SourceFunction
from benchlab.sweep.plan import SweepPlan
from benchlab.sweep.safety import GuardedSmu, GuardedSupply

PROBE_LIMIT_A = 1e-3  # current limit / compliance of the probe (a harmless 1 mA, common practice)
PROBE_V = 5.0  # probe volts (capped at the bench's max_supply_v): above power-MOSFET thresholds of 1-4 V
CLAMP_FRACTION = 0.9  # the resistor fixture: a part is seated when it holds the volts below this share of the probe
CONDUCTING_A = 1e-4  # the SMU: a part is seated when it draws more than this


@dataclass(frozen=True)
class ProbeReading:
    """One look at the fixture."""

    seated: bool  # a part conducts across the fixture
    volts: float  # across the part (V)
    amps: float | None  # through the part when known (A)


class FixtureProbe:
    """Probe the fixture of ``instruments`` (a bench) within ``plan``'s limits.

    Parameters
    ----------
    plan : SweepPlan
        Gives the fixture, the limits and the worst-case series resistor.
    instruments : object
        The open bench (``supply`` and ``meter``, or ``smu``).
    """

    def __init__(self, plan: SweepPlan, instruments, clock=time.monotonic):
        self.plan = plan
        self.volts = min(PROBE_V, plan.limits.max_supply_v)
        if plan.fixture == Fixture.RESISTOR:
            self.source = GuardedSupply(instruments.supply, plan.limits, plan.worst_case_resistor_ohm(), clock)
            self.meter = instruments.meter
        else:
            self.source = GuardedSmu(instruments.smu, plan.limits, clock)
            self.meter = None
        self.on = False

    def start(self) -> None:
        """Output off, 1 mA limit first, the probe volts, output on."""
        self.source.safe_off()
        if self.meter is not None:
            self.source.set_current_limit(PROBE_LIMIT_A)
            self.source.set_voltage(self.volts)
            self.meter.configure_voltage(None, self.plan.nplc)
        else:
            self.source.configure_source(SourceFunction.VOLTAGE, PROBE_LIMIT_A)
            self.source.set_nplc(self.plan.nplc)
            self.source.set_level(self.volts)
        self.source.set_output(True)
        self.on = True

    def read(self) -> ProbeReading:
        """One reading of the fixture (the probe must be on)."""
        if self.meter is not None:
            volts = float(self.meter.read())
            return ProbeReading(volts < CLAMP_FRACTION * self.volts, volts, None)
        volts, amps = self.source.measure()
        return ProbeReading(float(amps) > CONDUCTING_A, float(volts), float(amps))

    def stop(self) -> list[str]:
        """Output off (returns the problems met switching it off, empty when it is off)."""
        self.on = False
        return self.source.safe_off()


__all__ = ["FixtureProbe", "ProbeReading", "PROBE_LIMIT_A"]
