"""The simulated one-channel DC supply (``PSU-1``): 0-30 V, 0-3 A, CV/CC.

Its regulation state reads through ``STATus:QUEStionable:CONDition?`` (SCPI-1999): bit 1 (CURRent)
is set while the output is on and held at the current limit (constant current).
"""

from __future__ import annotations

from benchlab.sim.instrument import QUESTIONABLE_CURRENT, SimInstrument
from benchlab.sim.scpi import CommandSpec, Param, boolean_value, format_number, numeric_value

SUPPLY_MAX_V = 30.0
SUPPLY_MAX_A = 3.0
SUPPLY_DEFAULT_LIMIT_A = 0.1
SETTLE_S = 0.005  # nominal output settling after a setpoint or output change
READBACK_S = 0.02  # nominal readback conversion time
READBACK_NOISE_V = 0.3e-3
READBACK_NOISE_A = 30e-6
READBACK_RESOLUTION_V = 1e-3
READBACK_RESOLUTION_A = 1e-4

_VOLTAGE = "[SOURce:]VOLTage[:LEVel][:IMMediate][:AMPLitude]"
_CURRENT = "[SOURce:]CURRent[:LEVel][:IMMediate][:AMPLitude]"


class SimSupply(SimInstrument):
    """Programmable supply feeding the ``resistor`` fixture (open circuit in the ``smu`` fixture)."""

    ROLE = "supply"
    MODEL = "PSU-1"
    COMMANDS = (
        CommandSpec(_VOLTAGE, False, "set_voltage", 1, 1),
        CommandSpec(_VOLTAGE, True, "query_voltage", 0, 1),
        CommandSpec(_CURRENT, False, "set_current_limit", 1, 1),
        CommandSpec(_CURRENT, True, "query_current_limit", 0, 1),
        CommandSpec("OUTPut[:STATe]", False, "set_output", 1, 1),
        CommandSpec("OUTPut[:STATe]", True, "query_output"),
        CommandSpec("MEASure[:SCALar]:VOLTage[:DC]", True, "measure_voltage"),
        CommandSpec("MEASure[:SCALar]:CURRent[:DC]", True, "measure_current"),
    )

    def reset_state(self) -> None:
        """``*RST`` state: output off (logged when it was on), 0 V, 0.1 A limit."""
        sources = self.core.fixture.sources
        if sources.supply_on:
            self.set_output_logged(False)
        sources.supply_on = False
        sources.supply_v = 0.0
        sources.supply_i_limit = SUPPLY_DEFAULT_LIMIT_A

    def _settle_if_on(self) -> None:
        if self.core.fixture.sources.supply_on:
            self.core.spend(SETTLE_S)

    def set_voltage(self, params: list[Param]) -> None:
        value = numeric_value(params[0], 0.0, SUPPLY_MAX_V, default=0.0, unit="V")
        self.core.catch_up()
        self.core.fixture.sources.supply_v = value
        self._settle_if_on()

    def query_voltage(self, params: list[Param]) -> str:
        if params:
            return format_number(numeric_value(params[0], 0.0, SUPPLY_MAX_V, default=0.0))
        return format_number(self.core.fixture.sources.supply_v)

    def set_current_limit(self, params: list[Param]) -> None:
        value = numeric_value(params[0], 0.0, SUPPLY_MAX_A, default=SUPPLY_DEFAULT_LIMIT_A, unit="A")
        self.core.catch_up()
        self.core.fixture.sources.supply_i_limit = value
        self._settle_if_on()

    def query_current_limit(self, params: list[Param]) -> str:
        if params:
            return format_number(numeric_value(params[0], 0.0, SUPPLY_MAX_A, default=SUPPLY_DEFAULT_LIMIT_A))
        return format_number(self.core.fixture.sources.supply_i_limit)

    def set_output(self, params: list[Param]) -> None:
        on = boolean_value(params[0])
        sources = self.core.fixture.sources
        self.core.catch_up()
        if on != sources.supply_on:
            sources.supply_on = on
            self.set_output_logged(on)
        self._settle_if_on()

    def query_output(self, params: list[Param]) -> str:
        return "1" if self.core.fixture.sources.supply_on else "0"

    def questionable_condition(self) -> int:
        """Bit 1 (CURRent, value 2) while the output is on and regulating at its current limit."""
        self.core.catch_up()
        if not self.core.fixture.sources.supply_on:
            return 0
        return QUESTIONABLE_CURRENT if self.core.fixture.operating_point().supply_mode == "CC" else 0

    def measure_voltage(self, params: list[Param]) -> str:
        point = self.core.take_reading(READBACK_S)
        volts = point.supply_v + self.core.noise(READBACK_NOISE_V)
        return format_number(round(volts / READBACK_RESOLUTION_V) * READBACK_RESOLUTION_V)

    def measure_current(self, params: list[Param]) -> str:
        point = self.core.take_reading(READBACK_S)
        amps = point.supply_i + self.core.noise(READBACK_NOISE_A)
        return format_number(round(amps / READBACK_RESOLUTION_A) * READBACK_RESOLUTION_A)
