"""Base of the three simulated instruments: message execution, IEEE 488.2 common commands,
``SYSTem`` commands and the simulator-only ``SIMulation`` commands.

Each concrete instrument adds its own ``COMMANDS`` table (rows of
:class:`benchlab.sim.scpi.CommandSpec`) and handler methods; :meth:`SimInstrument.execute`
parses one received line and dispatches through the table.
"""

from __future__ import annotations

import json
import threading

from benchlab.errors import InputError
from benchlab.sim.core import POWER_LINE_CYCLE_S, BenchCore
from benchlab.sim.fixture import thermistor_ohm
from benchlab.sim.faults import RoleFaults
from benchlab.sim.physics import REFERENCE_TEMPERATURE_K
from benchlab.sim.scpi import (
    CommandSpec, CommandTable, Param, ScpiError, format_number, parse_unit, quote_string, split_message,
    numeric_value,
)
from benchlab.sim.status import ESR_OPERATION_COMPLETE, StatusModel

MAKER = "BENCHLAB-SIM"
FIRMWARE = "0.1"
SCPI_VERSION = "1999.0"
# Most program message units one line may carry: bounds the instrument time one line can queue
# (a line of READ? at 100 PLC each would otherwise keep the instrument busy for hours).
MAX_UNITS_PER_MESSAGE = 32
# STATus:QUEStionable condition bits (SCPI-1999 vol. 1, status reporting; from memory)
QUESTIONABLE_VOLTAGE = 1 << 0
QUESTIONABLE_CURRENT = 1 << 1

COMMON_COMMANDS: tuple[CommandSpec, ...] = (
    CommandSpec("*IDN", True, "query_identity"),
    CommandSpec("*RST", False, "command_reset"),
    CommandSpec("*CLS", False, "command_clear_status"),
    CommandSpec("*OPC", True, "query_operation_complete"),
    CommandSpec("*OPC", False, "command_operation_complete"),
    CommandSpec("*WAI", False, "command_wait"),
    CommandSpec("*ESR", True, "query_event_status"),
    CommandSpec("*ESE", False, "command_event_enable", 1, 1),
    CommandSpec("*ESE", True, "query_event_enable"),
    CommandSpec("*STB", True, "query_status_byte"),
    CommandSpec("*TST", True, "query_self_test"),
    CommandSpec("*TRG", False, "command_trigger"),
    CommandSpec("SYSTem:ERRor[:NEXT]", True, "query_error"),
    CommandSpec("SYSTem:ERRor:COUNt", True, "query_error_count"),
    CommandSpec("SYSTem:VERSion", True, "query_version"),
    CommandSpec("STATus:QUEStionable:CONDition", True, "query_questionable_condition"),
    CommandSpec("SIMulation:PART:NEXT", False, "command_next_part"),
    CommandSpec("SIMulation:PART:INDex", True, "query_part_index"),
    CommandSpec("SIMulation:PART:LABel", True, "query_part_label"),
    CommandSpec("SIMulation:PART:TRUTh", True, "query_part_truth"),
    CommandSpec("SIMulation:TEMPerature", True, "query_temperature"),
    CommandSpec("SIMulation:FIXTure:TEMPerature", False, "set_fixture_temperature", 1, 1),
    CommandSpec("SIMulation:FIXTure:TEMPerature", True, "query_fixture_temperature"),
    CommandSpec("SIMulation:FIXTure:SENSor[:TEMPerature]", True, "query_sensor_temperature"),
    CommandSpec("SIMulation:FIXTure:SENSor:RESistance", True, "query_sensor_resistance"),
    CommandSpec("SIMulation:CLOCk:ADVance", False, "command_advance_clock", 1, 1),
    CommandSpec("SIMulation:CLOCk", True, "query_clock"),
)

# The simulated fixture block: settable from 250 K to 450 K (an invented heater/chiller range); its sensor reads
# the block with this much noise (sigma, K), an invented but typical thermistor-readout figure.
FIXTURE_MIN_K, FIXTURE_MAX_K = 250.0, 450.0
SENSOR_NOISE_K = 0.01
MAX_CLOCK_ADVANCE_S = 3600.0


class SimInstrument:
    """One simulated instrument (subclasses set ``ROLE``, ``MODEL``, ``COMMANDS``).

    Parameters
    ----------
    core : BenchCore
        Bench state shared with the other instruments.
    serial : str
        Serial number shown by ``*IDN?``.
    faults : RoleFaults
        Fault bookkeeping of this instrument (the ``error`` rules are applied here).
    """

    ROLE = ""
    MODEL = ""
    COMMANDS: tuple[CommandSpec, ...] = ()

    def __init__(self, core: BenchCore, serial: str, faults: RoleFaults):
        self.core = core
        self.serial = serial
        self.faults = faults
        self.status = StatusModel()
        self.lock = threading.RLock()  # this instrument's own: one message at a time, others unaffected
        self.table = CommandTable(COMMON_COMMANDS + self.COMMANDS)
        self._injected_errors = [(self._spec_for_header(header), code) for header, code in faults.error_rules]
        self.reset_state()

    def _spec_for_header(self, header: str) -> CommandSpec:
        try:
            unit = parse_unit(header)
        except ScpiError:
            unit = None
        spec = self.table.lookup(list(unit.keywords), unit.query) if unit else None
        if spec is None:
            raise InputError(f"fault error@{self.ROLE}={header}: '{header}' is not a command of the {self.ROLE}")
        return spec

    # ----------------------------------------------------------------- execution
    def execute(self, line: str) -> list[str]:
        """Execute one received line (a program message); returns the query replies in order.

        Errors go to the error queue; a command error (-1xx) discards the rest of the message. A
        message of more than :data:`MAX_UNITS_PER_MESSAGE` units is refused whole (-223). The line
        holds this instrument's lock; each unit holds the bench's shared lock only while it runs
        (and not while it waits on the virtual clock).
        """
        with self.lock:
            replies: list[str] = []
            try:
                units = split_message(line)
            except ScpiError as exc:
                self.status.push(exc.code, exc.text)
                return replies
            if len(units) > MAX_UNITS_PER_MESSAGE:
                self.status.push(-223, f"Too much data; more than {MAX_UNITS_PER_MESSAGE} commands in one line")
                return replies
            path: tuple[str, ...] = ()
            for text in units:
                with self.core.lock:
                    self.core.operator_tick()
                    if not self._execute_unit(text, path, replies):
                        break
                    path = self._path
            return replies

    def _execute_unit(self, text: str, path: tuple[str, ...], replies: list[str]) -> bool:
        """Run one program message unit; False when the rest of the message is discarded."""
        self._path = path
        try:
            unit = parse_unit(text)
            if unit is None:
                return True
            spec, self._path = self._resolve(unit, path)
            self._check_param_count(spec, unit.params)
            for faulty_spec, code in self._injected_errors:
                if faulty_spec is spec:
                    self.core.log.add(self.ROLE, "fault", f"error {code} on {unit.header_text}", self.core.now())
                    raise ScpiError(code, "injected fault")
            result = getattr(self, spec.handler)(list(unit.params))
            if spec.query:
                replies.append(str(result))
        except ScpiError as exc:
            self.status.push(exc.code, exc.text)
            if exc.is_command_error:
                return False
        except Exception as exc:  # a simulator bug must not take the connection down
            self.status.push(-300, f"Device-specific error; {type(exc).__name__}")
            self.core.log.add(self.ROLE, "fault", f"internal error on '{text[:80]}': {exc!r}",
                              self.core.now())
            return False
        return True

    def _resolve(self, unit, path: tuple[str, ...]) -> tuple[CommandSpec, tuple[str, ...]]:
        # SCPI-1999 6.2.4: after ';' a header is relative to the previous command's path;
        # a leading ':' or a common command goes back to the root. Fall back to the root.
        keywords = list(unit.keywords)
        if unit.common:
            spec = self.table.lookup(keywords, unit.query)
            if spec is None:
                raise ScpiError(-113, unit.header_text.split(" ")[0])
            return spec, path
        candidates = [keywords] if unit.absolute or not path else [list(path) + keywords, keywords]
        for typed in candidates:
            spec = self.table.lookup(typed, unit.query)
            if spec is not None:
                return spec, tuple(typed[:-1])
        raise ScpiError(-113, unit.header_text.split(" ")[0][:40])

    @staticmethod
    def _check_param_count(spec: CommandSpec, params) -> None:
        if len(params) < spec.min_params:
            raise ScpiError(-109)
        if spec.max_params >= 0 and len(params) > spec.max_params:
            raise ScpiError(-108)

    # ----------------------------------------------------------------- hooks for subclasses
    def reset_state(self) -> None:
        """Put the instrument-specific settings in their ``*RST`` state (subclasses)."""

    def set_output_logged(self, on: bool) -> None:
        """Record an output change in the log (subclasses call it when the state really changes)."""
        self.core.log.add(self.ROLE, "output", "ON" if on else "OFF", self.core.now())
        self.core.output_changed(on)

    def trigger(self) -> None:
        """``*TRG``: subclasses without a trigger system report -211."""
        raise ScpiError(-211)

    # ----------------------------------------------------------------- common commands
    def query_identity(self, params: list[Param]) -> str:
        return f"{MAKER},{self.MODEL},{self.serial},{FIRMWARE}"

    def command_reset(self, params: list[Param]) -> None:
        self.core.catch_up()
        self.reset_state()

    def command_clear_status(self, params: list[Param]) -> None:
        self.status.clear()

    def query_operation_complete(self, params: list[Param]) -> str:
        return "1"  # every operation, list sweeps included, completes before the next message

    def command_operation_complete(self, params: list[Param]) -> None:
        self.status.esr |= ESR_OPERATION_COMPLETE

    def command_wait(self, params: list[Param]) -> None:
        return None

    def query_event_status(self, params: list[Param]) -> str:
        return str(self.status.read_esr())

    def command_event_enable(self, params: list[Param]) -> None:
        self.status.ese = int(numeric_value(params[0], 0, 255))

    def query_event_enable(self, params: list[Param]) -> str:
        return str(self.status.ese)

    def query_status_byte(self, params: list[Param]) -> str:
        return str(self.status.status_byte())

    def query_self_test(self, params: list[Param]) -> str:
        return "0"

    def command_trigger(self, params: list[Param]) -> None:
        self.trigger()

    def query_error(self, params: list[Param]) -> str:
        code, text = self.status.pop()
        return f"{code:+d},{quote_string(text)}" if code else f"0,{quote_string(text)}"

    def query_error_count(self, params: list[Param]) -> str:
        return str(self.status.count)

    def query_version(self, params: list[Param]) -> str:
        return SCPI_VERSION

    def questionable_condition(self) -> int:
        """The QUEStionable condition register (SCPI-1999 vol. 1, status reporting): bit 0 VOLTage, bit 1 CURRent.

        An instrument sets bit 1 while its current is held at a limit and bit 0 while its voltage is;
        the others report 0.
        """
        return 0

    def query_questionable_condition(self, params: list[Param]) -> str:
        return str(self.questionable_condition())

    # ----------------------------------------------------------------- simulator-only commands
    def command_next_part(self, params: list[Param]) -> None:
        if self.core.outputs_on():
            raise ScpiError(-221, "switch the output off before changing the part")
        self.core.next_part()

    def query_part_index(self, params: list[Param]) -> str:
        return str(self.core.part_index)

    def query_part_label(self, params: list[Param]) -> str:
        part = self.core.part
        return quote_string(part.label if part is not None and self.core.part_index >= 0 else "")

    def query_part_truth(self, params: list[Param]) -> str:
        part = self.core.part
        truth: dict = {}
        if part is not None and self.core.part_index >= 0:
            truth = part.to_dict()
            truth["for_tests_only"] = True
            truth["index"] = self.core.part_index
            truth["series_resistor_actual_ohm"] = self.core.fixture.resistor_ohm
            truth["ambient_k"] = self.core.fixture.ambient_k
            truth["reference_temperature_k"] = REFERENCE_TEMPERATURE_K
        return quote_string(json.dumps(truth, sort_keys=True))

    def query_temperature(self, params: list[Param]) -> str:
        self.core.catch_up()
        return format_number(self.core.fixture.temperature_k)

    def set_fixture_temperature(self, params: list[Param]) -> None:
        setpoint = numeric_value(params[0], FIXTURE_MIN_K, FIXTURE_MAX_K, unit="K")
        self.core.fixture.set_block(setpoint, self.core.now())
        self.core.log.add(self.ROLE, "fixture", f"block setpoint {setpoint:.3f} K", self.core.now())

    def query_fixture_temperature(self, params: list[Param]) -> str:
        return format_number(self.core.fixture.block_setpoint_k)

    def _sensed_block_k(self) -> float:
        self.core.spend(POWER_LINE_CYCLE_S)  # one reading of the sensor takes a power-line cycle
        return self.core.fixture.block_k + self.core.noise(SENSOR_NOISE_K)

    def query_sensor_temperature(self, params: list[Param]) -> str:
        return format_number(self._sensed_block_k())

    def query_sensor_resistance(self, params: list[Param]) -> str:
        return format_number(thermistor_ohm(self._sensed_block_k()))

    def command_advance_clock(self, params: list[Param]) -> None:
        self.core.spend(numeric_value(params[0], 0.0, MAX_CLOCK_ADVANCE_S, unit="S"))

    def query_clock(self, params: list[Param]) -> str:
        return format_number(self.core.now())
