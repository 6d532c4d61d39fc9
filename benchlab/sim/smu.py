"""The simulated source-measure unit (``SMU-1``), straight across the part in the ``smu`` fixture.

Forces volts (0-20 V, current compliance) or amps (0-1 A, voltage compliance) and measures
both. The compliance is the other quantity's SOURce limit (``CURRent:LIMit`` while forcing
volts, ``VOLTage:LIMit`` while forcing amps); a reading held at it sets its bit in
``STATus:QUEStionable:CONDition?``. A list sweep is uploaded once (``LIST:VOLTage``), started
once (``INITiate``, which empties the buffer first) and read back in one ``TRACe:DATA?`` (or
``FETCh:ARRay:VOLTage?`` / ``FETCh:ARRay:CURRent?``) transfer. Each list point waits the dwell,
then integrates for NPLC x 20 ms of virtual time. The buffer holds up to 2000 readings (a limit
of our own).
"""

from __future__ import annotations

import math

from benchlab.sim.core import POWER_LINE_CYCLE_S
from benchlab.sim.instrument import QUESTIONABLE_CURRENT, QUESTIONABLE_VOLTAGE, SimInstrument
from benchlab.sim.scpi import (
    CommandSpec, Param, ScpiError, boolean_value, choice_value, format_number, numeric_value,
)

SMU_MAX_V = 20.0
SMU_MAX_A = 1.0
DEFAULT_I_COMPLIANCE = 0.1
DEFAULT_V_COMPLIANCE = 20.0
MAX_LIST_POINTS = 2000  # list and buffer length (our own figure)
MAX_DWELL_S = 60.0
NPLC_MIN, NPLC_MAX = 0.01, 10.0
SETTLE_S = 0.001
VOLT_NOISE_V = 20e-6  # sigma at 1 PLC
CURRENT_NOISE_RELATIVE = 1e-4
CURRENT_NOISE_FLOOR_A = 50e-12

_VOLT_LEVEL = "[SOURce:]VOLTage[:LEVel][:IMMediate][:AMPLitude]"
_CURR_LEVEL = "[SOURce:]CURRent[:LEVel][:IMMediate][:AMPLitude]"


UNSETTLED_SLOPE_V = 0.04  # n UT, about 40 mV (Enz, Krummenacher, Vittoz 1995)


class SimSmu(SimInstrument):
    """Source-measure unit with compliance, list sweeps and a reading buffer."""

    ROLE = "smu"
    MODEL = "SMU-1"
    COMMANDS = (
        CommandSpec("[SOURce:]FUNCtion:MODE", False, "set_function", 1, 1),
        CommandSpec("[SOURce:]FUNCtion:MODE", True, "query_function"),
        CommandSpec(_VOLT_LEVEL, False, "set_voltage", 1, 1),
        CommandSpec(_VOLT_LEVEL, True, "query_voltage"),
        CommandSpec(_CURR_LEVEL, False, "set_current", 1, 1),
        CommandSpec(_CURR_LEVEL, True, "query_current"),
        CommandSpec("[SOURce:]CURRent:LIMit[:AMPLitude]", False, "set_current_compliance", 1, 1),
        CommandSpec("[SOURce:]CURRent:LIMit[:AMPLitude]", True, "query_current_compliance"),
        CommandSpec("[SOURce:]VOLTage:LIMit[:AMPLitude]", False, "set_voltage_compliance", 1, 1),
        CommandSpec("[SOURce:]VOLTage:LIMit[:AMPLitude]", True, "query_voltage_compliance"),
        CommandSpec("[SENSe:]CURRent[:DC]:NPLCycles", False, "set_nplc", 1, 1),
        CommandSpec("[SENSe:]CURRent[:DC]:NPLCycles", True, "query_nplc"),
        CommandSpec("[SENSe:]VOLTage[:DC]:NPLCycles", False, "set_nplc", 1, 1),
        CommandSpec("[SENSe:]VOLTage[:DC]:NPLCycles", True, "query_nplc"),
        CommandSpec("OUTPut[:STATe]", False, "set_output", 1, 1),
        CommandSpec("OUTPut[:STATe]", True, "query_output"),
        CommandSpec("MEASure[:SCALar]:VOLTage[:DC]", True, "measure_voltage"),
        CommandSpec("MEASure[:SCALar]:CURRent[:DC]", True, "measure_current"),
        CommandSpec("READ", True, "query_read"),
        CommandSpec("[SOURce:]LIST:VOLTage", False, "set_voltage_list", 1, -1),
        CommandSpec("[SOURce:]LIST:VOLTage", True, "query_voltage_list"),
        CommandSpec("[SOURce:]LIST:VOLTage:POINts", True, "query_voltage_list_points"),
        CommandSpec("[SOURce:]LIST:CURRent", False, "set_current_list", 1, -1),
        CommandSpec("[SOURce:]LIST:CURRent", True, "query_current_list"),
        CommandSpec("[SOURce:]LIST:CURRent:POINts", True, "query_current_list_points"),
        CommandSpec("[SOURce:]LIST:DWELl", False, "set_dwell", 1, -1),
        CommandSpec("[SOURce:]LIST:DWELl", True, "query_dwell"),
        CommandSpec("[SOURce:]VOLTage:MODE", False, "set_voltage_mode", 1, 1),
        CommandSpec("[SOURce:]VOLTage:MODE", True, "query_voltage_mode"),
        CommandSpec("[SOURce:]CURRent:MODE", False, "set_current_mode", 1, 1),
        CommandSpec("[SOURce:]CURRent:MODE", True, "query_current_mode"),
        CommandSpec("INITiate[:IMMediate]", False, "command_initiate"),
        CommandSpec("TRACe[:DATA]", True, "query_buffer"),
        CommandSpec("FETCh:ARRay:VOLTage[:DC]", True, "query_buffer_volts"),
        CommandSpec("FETCh:ARRay:CURRent[:DC]", True, "query_buffer_amps"),
    )

    def reset_state(self) -> None:
        """``*RST`` state: output off, forcing 0 V, default compliances, lists and buffer empty."""
        sources = self.core.fixture.sources
        if sources.smu_on:
            self.set_output_logged(False)
        sources.smu_on = False
        sources.smu_function = "VOLTAGE"
        sources.smu_level_v = 0.0
        sources.smu_level_i = 0.0
        sources.smu_i_compliance = DEFAULT_I_COMPLIANCE
        sources.smu_v_compliance = DEFAULT_V_COMPLIANCE
        self.nplc = 1.0
        self.lists: dict[str, list[float]] = {"VOLTAGE": [], "CURRENT": []}
        self.modes = {"VOLTAGE": "FIXED", "CURRENT": "FIXED"}
        self.dwell_s: list[float] = [0.0]
        self.buffer: list[tuple[float, float]] = []
        self.tripped = False

    # ----------------------------------------------------------------- source settings
    def _change(self, **settings) -> None:
        self.core.catch_up()
        for name, value in settings.items():
            setattr(self.core.fixture.sources, name, value)
        if self.core.fixture.sources.smu_on:
            self.core.spend(SETTLE_S)

    def set_function(self, params: list[Param]) -> None:
        self._change(smu_function=choice_value(params[0], ("VOLTage", "CURRent")))

    def query_function(self, params: list[Param]) -> str:
        return "VOLT" if self.core.fixture.sources.smu_function == "VOLTAGE" else "CURR"

    def set_voltage(self, params: list[Param]) -> None:
        self._change(smu_level_v=numeric_value(params[0], 0.0, SMU_MAX_V, default=0.0, unit="V"))

    def query_voltage(self, params: list[Param]) -> str:
        return format_number(self.core.fixture.sources.smu_level_v)

    def set_current(self, params: list[Param]) -> None:
        self._change(smu_level_i=numeric_value(params[0], 0.0, SMU_MAX_A, default=0.0, unit="A"))

    def query_current(self, params: list[Param]) -> str:
        return format_number(self.core.fixture.sources.smu_level_i)

    def set_current_compliance(self, params: list[Param]) -> None:
        value = numeric_value(params[0], 1e-8, SMU_MAX_A * 1.05, default=DEFAULT_I_COMPLIANCE, unit="A")
        self._change(smu_i_compliance=value)

    def query_current_compliance(self, params: list[Param]) -> str:
        return format_number(self.core.fixture.sources.smu_i_compliance)

    def set_voltage_compliance(self, params: list[Param]) -> None:
        value = numeric_value(params[0], 0.01, SMU_MAX_V * 1.05, default=DEFAULT_V_COMPLIANCE, unit="V")
        self._change(smu_v_compliance=value)

    def query_voltage_compliance(self, params: list[Param]) -> str:
        return format_number(self.core.fixture.sources.smu_v_compliance)

    def questionable_condition(self) -> int:
        """Bit 1 (CURRent) when the last reading was held at the current limit (forcing volts), bit 0
        (VOLTage) when held at the voltage limit (forcing amps)."""
        if not self.tripped:
            return 0
        return QUESTIONABLE_CURRENT if self.core.fixture.sources.smu_function == "VOLTAGE" else QUESTIONABLE_VOLTAGE

    def set_nplc(self, params: list[Param]) -> None:
        self.nplc = numeric_value(params[0], NPLC_MIN, NPLC_MAX, default=1.0)

    def query_nplc(self, params: list[Param]) -> str:
        return format_number(self.nplc)

    def set_output(self, params: list[Param]) -> None:
        on = boolean_value(params[0])
        sources = self.core.fixture.sources
        self.core.catch_up()
        if on != sources.smu_on:
            sources.smu_on = on
            self.set_output_logged(on)
        if on:
            self.core.spend(SETTLE_S)

    def query_output(self, params: list[Param]) -> str:
        return "1" if self.core.fixture.sources.smu_on else "0"

    # ----------------------------------------------------------------- measuring
    def _reading(self) -> tuple[float, float]:
        point = self.core.take_reading(self.nplc * POWER_LINE_CYCLE_S)
        scale = 1.0 / math.sqrt(self.nplc)
        if not self.core.fixture.sources.smu_on:
            point_v, point_i, tripped = 0.0, 0.0, False
        else:
            point_v, point_i, tripped = point.smu_v, point.smu_i, point.smu_tripped
        self.tripped = tripped
        volts = point_v + self.core.noise(VOLT_NOISE_V * scale)
        amps = point_i + self.core.noise((CURRENT_NOISE_RELATIVE * abs(point_i) + CURRENT_NOISE_FLOOR_A) * scale)
        wobble = self.faults.reading_wobble_v()
        if wobble and self.core.fixture.sources.smu_function == "VOLTAGE":
            amps *= math.exp(wobble / UNSETTLED_SLOPE_V)  # the same VGS wobble seen through the sub-threshold slope
        elif wobble:
            volts += wobble
        return volts, amps

    def measure_voltage(self, params: list[Param]) -> str:
        return format_number(self._reading()[0])

    def measure_current(self, params: list[Param]) -> str:
        return format_number(self._reading()[1])

    def query_read(self, params: list[Param]) -> str:
        volts, amps = self._reading()
        return f"{format_number(volts)},{format_number(amps)}"

    # ----------------------------------------------------------------- lists and buffer
    def _set_list(self, function: str, params: list[Param], high: float, unit: str) -> None:
        if len(params) > MAX_LIST_POINTS:
            raise ScpiError(-223, f"at most {MAX_LIST_POINTS} points")
        self.lists[function] = [numeric_value(p, 0.0, high, unit=unit) for p in params]

    def set_voltage_list(self, params: list[Param]) -> None:
        self._set_list("VOLTAGE", params, SMU_MAX_V, "V")

    def set_current_list(self, params: list[Param]) -> None:
        self._set_list("CURRENT", params, SMU_MAX_A, "A")

    def query_voltage_list(self, params: list[Param]) -> str:
        return ",".join(format_number(v) for v in self.lists["VOLTAGE"])

    def query_current_list(self, params: list[Param]) -> str:
        return ",".join(format_number(v) for v in self.lists["CURRENT"])

    def query_voltage_list_points(self, params: list[Param]) -> str:
        return str(len(self.lists["VOLTAGE"]))

    def query_current_list_points(self, params: list[Param]) -> str:
        return str(len(self.lists["CURRENT"]))

    def set_dwell(self, params: list[Param]) -> None:
        self.dwell_s = [numeric_value(p, 0.0, MAX_DWELL_S, unit="S") for p in params]

    def query_dwell(self, params: list[Param]) -> str:
        return ",".join(format_number(v) for v in self.dwell_s)

    def set_voltage_mode(self, params: list[Param]) -> None:
        self.modes["VOLTAGE"] = choice_value(params[0], ("FIXed", "LIST"))

    def set_current_mode(self, params: list[Param]) -> None:
        self.modes["CURRENT"] = choice_value(params[0], ("FIXed", "LIST"))

    def query_voltage_mode(self, params: list[Param]) -> str:
        return "FIX" if self.modes["VOLTAGE"] == "FIXED" else "LIST"

    def query_current_mode(self, params: list[Param]) -> str:
        return "FIX" if self.modes["CURRENT"] == "FIXED" else "LIST"

    def trigger(self) -> None:
        """``*TRG``: the same as ``INITiate``."""
        self.command_initiate([])

    def command_initiate(self, params: list[Param]) -> None:
        """Empty the buffer, then run the list once (LIST mode) or take one reading into it (FIXed mode)."""
        sources = self.core.fixture.sources
        function = sources.smu_function
        self.buffer = []
        if self.modes[function] != "LIST":
            self.buffer = [self._reading()]
            return
        points = self.lists[function]
        if not sources.smu_on:
            raise ScpiError(-221, "output is off")
        if not points:
            raise ScpiError(-221, "the list is empty")
        if len(self.dwell_s) not in (1, len(points)):
            raise ScpiError(-226, "dwell list and source list differ in length")
        level_name = "smu_level_v" if function == "VOLTAGE" else "smu_level_i"
        fixed_level = getattr(sources, level_name)
        try:
            for index, level in enumerate(points):
                self._change(**{level_name: level})
                self.core.spend(self.dwell_s[index if len(self.dwell_s) > 1 else 0])
                self.buffer.append(self._reading())
        finally:
            self._change(**{level_name: fixed_level})

    def query_buffer(self, params: list[Param]) -> str:
        """Every reading of the buffer as ``v1,i1,v2,i2,...`` (empty when there is none)."""
        return ",".join(f"{format_number(v)},{format_number(i)}" for v, i in self.buffer)

    def query_buffer_volts(self, params: list[Param]) -> str:
        return ",".join(format_number(v) for v, _ in self.buffer)

    def query_buffer_amps(self, params: list[Param]) -> str:
        return ",".join(format_number(i) for _, i in self.buffer)
