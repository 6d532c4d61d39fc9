"""The simulated DC multimeter (``DMM-1``), wired across the part in the ``resistor`` fixture.

Volts read the voltage across the part; amps read the current of the resistor branch. Ranges
have 20 % over-range; beyond it a reading is the SCPI +/-9.9E37. Noise is Gaussian with a
standard deviation proportional to the range and to 1/sqrt(NPLC) (white noise averaged over
the integration time); a reading takes NPLC x 20 ms of virtual time.
"""

from __future__ import annotations

import math

from benchlab.sim.core import POWER_LINE_CYCLE_S
from benchlab.sim.instrument import SimInstrument
from benchlab.sim.scpi import (
    CommandSpec, Keyword, Param, ScpiError, boolean_value, format_number, numeric_value, parse_unit,
    quote_string,
)

VOLTAGE_RANGES = (0.1, 1.0, 10.0, 100.0, 1000.0)
CURRENT_RANGES = (0.01, 0.1, 1.0, 2.0)  # A; ranges and NPLC bounds are our own figures
OVER_RANGE = 1.2  # readable up to 120 % of the range (common practice)
NPLC_MIN, NPLC_MAX = 0.01, 50.0
NOISE_PER_RANGE = {"VOLT": 1e-6, "CURR": 2e-6}  # sigma / range at 1 PLC
FUNCTIONS = {"VOLT": VOLTAGE_RANGES, "CURR": CURRENT_RANGES}
DEFAULT_RANGE = {"VOLT": 10.0, "CURR": 1.0}
UNITS = {"VOLT": "V", "CURR": "A"}


def _function_commands(word: str, prefix: str) -> tuple[CommandSpec, ...]:
    sense = f"[SENSe:]{word}[:DC]"
    return (
        CommandSpec(f"CONFigure[:SCALar]:{word}[:DC]", False, f"{prefix}_configure", 0, 1),
        CommandSpec(f"MEASure[:SCALar]:{word}[:DC]", True, f"{prefix}_measure", 0, 1),
        CommandSpec(f"{sense}:NPLCycles", False, f"{prefix}_set_nplc", 1, 1),
        CommandSpec(f"{sense}:NPLCycles", True, f"{prefix}_query_nplc", 0, 1),
        CommandSpec(f"{sense}:RANGe", False, f"{prefix}_set_range", 1, 1),
        CommandSpec(f"{sense}:RANGe", True, f"{prefix}_query_range"),
        CommandSpec(f"{sense}:RANGe:AUTO", False, f"{prefix}_set_auto", 1, 1),
        CommandSpec(f"{sense}:RANGe:AUTO", True, f"{prefix}_query_auto"),
    )


def range_for(value: float, ranges: tuple[float, ...]) -> float:
    """Smallest range holding ``|value|`` (the largest when none does)."""
    for candidate in ranges:
        if abs(value) <= candidate:
            return candidate
    return ranges[-1]


class SimMeter(SimInstrument):
    """DC volts/amps meter with ranges, NPLC and over-range readings."""

    ROLE = "meter"
    MODEL = "DMM-1"
    COMMANDS = (
        *_function_commands("VOLTage", "volt"),
        *_function_commands("CURRent", "curr"),
        CommandSpec("READ", True, "query_read"),
        CommandSpec("INITiate[:IMMediate]", False, "command_initiate"),
        CommandSpec("FETCh", True, "query_fetch"),
        CommandSpec("[SENSe:]FUNCtion[:ON]", False, "set_function", 1, 1),
        CommandSpec("[SENSe:]FUNCtion[:ON]", True, "query_function"),
        CommandSpec("CONFigure", True, "query_configuration"),
    )

    def reset_state(self) -> None:
        """``*RST`` state: DC volts, autorange, NPLC 1, no reading."""
        self.function = "VOLT"
        self.nplc = {"VOLT": 1.0, "CURR": 1.0}
        self.fixed_range: dict[str, float | None] = {"VOLT": None, "CURR": None}  # None = autorange
        self.last_reading: float | None = None

    # ----------------------------------------------------------------- reading
    def _true_value(self, function: str) -> float:
        point = self.core.take_reading(self.nplc[function] * POWER_LINE_CYCLE_S)
        if self.core.fixture.kind != "resistor":
            return 0.0
        return point.part_v if function == "VOLT" else point.part_i

    def take_reading(self) -> float:
        """One reading of the selected function (over-range -> +/-inf)."""
        function = self.function
        true_value = self._true_value(function)
        ranges = FUNCTIONS[function]
        full_range = self.fixed_range[function] or range_for(true_value, ranges)
        sigma = NOISE_PER_RANGE[function] * full_range / math.sqrt(self.nplc[function])
        value = true_value + self.core.noise(sigma)
        wobble = self.faults.reading_wobble_v()
        if function == "VOLT" and wobble:
            value += wobble
        if abs(value) > OVER_RANGE * full_range:
            value = math.copysign(math.inf, value)
        self.last_reading = value
        return value

    def trigger(self) -> None:
        """``*TRG``: take one reading (read it with ``FETCh?``)."""
        self.take_reading()

    def command_initiate(self, params: list[Param]) -> None:
        self.take_reading()

    def query_fetch(self, params: list[Param]) -> str:
        if self.last_reading is None:
            raise ScpiError(-230, "no reading taken")
        return format_number(self.last_reading)

    def query_read(self, params: list[Param]) -> str:
        return format_number(self.take_reading())

    # ----------------------------------------------------------------- configuration
    def _parse_range(self, function: str, param: Param) -> float | None:
        ranges = FUNCTIONS[function]
        if param.kind == "char" and Keyword.from_mixed_case("AUTO", False).accepts(str(param.value)):
            return None
        if param.kind == "char" and str(param.value) in ("DEF", "DEFAULT"):
            return DEFAULT_RANGE[function]
        value = numeric_value(param, 0.0, ranges[-1], unit=UNITS[function], minimum=ranges[0])
        return range_for(value, ranges)

    def _configure(self, function: str, params: list[Param]) -> None:
        if params and params[0].kind == "char" and str(params[0].value) in ("DEF", "DEFAULT"):
            chosen = None  # CONFigure DEF = autorange
        else:
            chosen = self._parse_range(function, params[0]) if params else None
        self.function = function
        self.fixed_range[function] = chosen
        self.last_reading = None

    def volt_configure(self, params: list[Param]) -> None:
        self._configure("VOLT", params)

    def curr_configure(self, params: list[Param]) -> None:
        self._configure("CURR", params)

    def volt_measure(self, params: list[Param]) -> str:
        self._configure("VOLT", params)
        return format_number(self.take_reading())

    def curr_measure(self, params: list[Param]) -> str:
        self._configure("CURR", params)
        return format_number(self.take_reading())

    def _set_nplc(self, function: str, params: list[Param]) -> None:
        self.nplc[function] = numeric_value(params[0], NPLC_MIN, NPLC_MAX, default=1.0)

    def _query_nplc(self, function: str, params: list[Param]) -> str:
        if params:
            return format_number(numeric_value(params[0], NPLC_MIN, NPLC_MAX, default=1.0))
        return format_number(self.nplc[function])

    def volt_set_nplc(self, params: list[Param]) -> None:
        self._set_nplc("VOLT", params)

    def curr_set_nplc(self, params: list[Param]) -> None:
        self._set_nplc("CURR", params)

    def volt_query_nplc(self, params: list[Param]) -> str:
        return self._query_nplc("VOLT", params)

    def curr_query_nplc(self, params: list[Param]) -> str:
        return self._query_nplc("CURR", params)

    def volt_set_range(self, params: list[Param]) -> None:
        self.fixed_range["VOLT"] = self._parse_range("VOLT", params[0])

    def curr_set_range(self, params: list[Param]) -> None:
        self.fixed_range["CURR"] = self._parse_range("CURR", params[0])

    def _query_range(self, function: str) -> str:
        fixed = self.fixed_range[function]
        return format_number(fixed if fixed is not None else DEFAULT_RANGE[function])

    def volt_query_range(self, params: list[Param]) -> str:
        return self._query_range("VOLT")

    def curr_query_range(self, params: list[Param]) -> str:
        return self._query_range("CURR")

    def _set_auto(self, function: str, params: list[Param]) -> None:
        if boolean_value(params[0]):
            self.fixed_range[function] = None
        elif self.fixed_range[function] is None:
            self.fixed_range[function] = DEFAULT_RANGE[function]

    def volt_set_auto(self, params: list[Param]) -> None:
        self._set_auto("VOLT", params)

    def curr_set_auto(self, params: list[Param]) -> None:
        self._set_auto("CURR", params)

    def volt_query_auto(self, params: list[Param]) -> str:
        return "1" if self.fixed_range["VOLT"] is None else "0"

    def curr_query_auto(self, params: list[Param]) -> str:
        return "1" if self.fixed_range["CURR"] is None else "0"

    def set_function(self, params: list[Param]) -> None:
        if params[0].kind != "string":
            raise ScpiError(-104, "the function is a quoted string, e.g. \"VOLT\"")
        try:
            unit = parse_unit(str(params[0].value))
        except ScpiError:
            unit = None
        if unit is None or unit.query or unit.params or unit.common:
            raise ScpiError(-224, f"function '{params[0].value}'")
        words = list(unit.keywords)
        for function, long_form in (("VOLT", "VOLTage"), ("CURR", "CURRent")):
            main = Keyword.from_mixed_case(long_form, False)
            if main.accepts(words[0]) and (len(words) == 1 or (len(words) == 2 and words[1] == "DC")):
                self.function = function
                self.last_reading = None
                return
        raise ScpiError(-224, f"function '{params[0].value}'")

    def query_function(self, params: list[Param]) -> str:
        return quote_string(self.function)

    def query_configuration(self, params: list[Param]) -> str:
        fixed = self.fixed_range[self.function]
        shown = fixed if fixed is not None else DEFAULT_RANGE[self.function]
        return quote_string(f"{self.function} {format_number(shown)}")
